#!/usr/bin/env bash
# Submits one night of the sharded lakescale job to Slurm: a measure array,
# a merge job, an apply array and a commit job, each held until the one
# before it has succeeded (--dependency=afterok), and cancelled if that one
# fails (--kill-on-invalid-dep=yes). It returns once all four are queued.
#
#   deploy/slurm/lakescale-nightly.sh
#   SHARDS=8 RUN_ID=2026-07-01 deploy/slurm/lakescale-nightly.sh
#   RUN_ID=2026-07-01 START_AT=apply TASKS=2 deploy/slurm/lakescale-nightly.sh
#       repair: apply shard 2 only, then commit
#
# Settings (environment; defaults in brackets):
#   LAKESCALE_JOB     job file, as lakescale --job takes it [/shared/lakescale/jobs/turbines.toml]
#   LAKESCALE_ROOT    location under which each night gets its work folder,
#                     statistics file and output; a path on a file system all
#                     nodes share, or s3://bucket/prefix [/shared/lakescale]
#   SHARDS            number of shards N, the same for measure and apply [4]
#   RUN_ID            the night [today's UTC date]
#   START_AT          first stage to submit: measure, merge, apply or commit [measure]
#   TASKS             array tasks of the first stage, if it is measure or
#                     apply, e.g. 2 or 1,3 [0-(N-1)]
#   LAKESCALE         the lakescale binary [lakescale on the PATH]
#   LAKESCALE_METRICS metrics file the commit writes after a success [none]
#   LOG_DIR           folder for the jobs' output files [./lakescale-logs]
# For s3:// locations, the usual AWS variables (AWS_REGION, AWS_PROFILE,
# AWS_ENDPOINT_URL_S3, ...) and LAKESCALE_S3_PATH_STYLE=true are passed on
# to the jobs with the rest of this environment (sbatch's default
# --export=ALL); credentials can also come from the shared AWS files in $HOME.
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)

SHARDS=${SHARDS:-4}
RUN_ID=${RUN_ID:-$(date -u +%F)}
LAKESCALE_JOB=${LAKESCALE_JOB:-/shared/lakescale/jobs/turbines.toml}
LAKESCALE_ROOT=${LAKESCALE_ROOT:-/shared/lakescale}
start_at=${START_AT:-measure}
log_dir=${LOG_DIR:-$PWD/lakescale-logs}

if [[ ! $SHARDS =~ ^[1-9][0-9]*$ ]]; then
  echo "lakescale-nightly: SHARDS '$SHARDS': want a whole number of at least 1" >&2
  exit 2
fi
case $start_at in
  measure | merge | apply | commit) ;;
  *)
    echo "lakescale-nightly: START_AT '$start_at': want measure, merge, apply or commit" >&2
    exit 2
    ;;
esac

# One work folder, statistics file and output per night: a sharded apply
# writes into a fresh output only.
LAKESCALE_WORK=$LAKESCALE_ROOT/work/$RUN_ID
LAKESCALE_STATS=$LAKESCALE_ROOT/stats/$RUN_ID.json
LAKESCALE_OUTPUT=$LAKESCALE_ROOT/scaled/$RUN_ID
export SHARDS LAKESCALE_JOB LAKESCALE_WORK LAKESCALE_STATS LAKESCALE_OUTPUT

mkdir -p "$log_dir"

dep=""
started=false
for stage in measure merge apply commit; do
  [[ $stage == "$start_at" ]] && started=true
  $started || continue
  args=(--parsable --kill-on-invalid-dep=yes --job-name="lakescale-$stage-$RUN_ID")
  if [[ -n $dep ]]; then
    args+=(--dependency="afterok:$dep")
  fi
  case $stage in
    measure | apply)
      tasks="0-$((SHARDS - 1))"
      if [[ $stage == "$start_at" && -n ${TASKS:-} ]]; then
        tasks=$TASKS
      fi
      args+=(--array="$tasks" --output="$log_dir/%x-%A_%a.out")
      ;;
    *)
      args+=(--output="$log_dir/%x-%j.out")
      ;;
  esac
  id=$(sbatch "${args[@]}" "$here/$stage.sbatch")
  dep=${id%%;*} # --parsable prints JOBID or JOBID;CLUSTER
  echo "lakescale-nightly: $stage of night $RUN_ID is job $dep"
done
echo "lakescale-nightly: the night is committed when $LAKESCALE_OUTPUT/_manifest.json exists"
