#!/usr/bin/env bash
# Runs one night of the sharded lakescale job on Kubernetes: measure, merge,
# apply and commit, each started when the one before it is complete.
#
#   deploy/kubernetes/run-nightly.sh                     # tonight, id = UTC date
#   RUN_ID=2026-07-01 deploy/kubernetes/run-nightly.sh   # a given night
#   RUN_ID=2026-07-01 START_AT=apply deploy/kubernetes/run-nightly.sh
#                                                        # repair: from a stage on
#
# RUN_ID replaces the RUN_ID placeholder in the manifests: it names the Jobs,
# the work folder, the statistics file and the output. It must be a valid
# part of a Kubernetes name (lower-case letters, digits and '-').
# A stage that is started again replaces its Job of the same night.
set -euo pipefail

here=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
run_id=${RUN_ID:-$(date -u +%F)}
namespace=${NAMESPACE:-lakescale}
start_at=${START_AT:-measure}
timeout_s=${TIMEOUT_SECONDS:-21600}   # per stage
poll_s=${POLL_SECONDS:-15}

stages=(measure merge apply commit)

if [[ ! $run_id =~ ^[a-z0-9]([-a-z0-9]*[a-z0-9])?$ ]]; then
  echo "run-nightly: RUN_ID '$run_id' is not a valid part of a Kubernetes name" >&2
  exit 2
fi
case $start_at in
  measure | merge | apply | commit) ;;
  *)
    echo "run-nightly: START_AT '$start_at': want measure, merge, apply or commit" >&2
    exit 2
    ;;
esac

kc() { kubectl --namespace "$namespace" "$@"; }

# wait_job NAME: returns 0 once the Job is complete, 1 once it has failed
# or after timeout_s. (kubectl wait --for=condition=complete alone would
# wait out its whole timeout on a failed Job.)
wait_job() {
  local job=$1 waited=0 state
  while ((waited < timeout_s)); do
    state=$(kc get job "$job" -o jsonpath='{range .status.conditions[?(@.status=="True")]}{.type}{" "}{end}')
    case " $state " in
      *" Complete "*) return 0 ;;
      *" Failed "*)
        echo "run-nightly: job/$job failed:" >&2
        kc get job "$job" -o jsonpath='{range .status.conditions[*]}{.type}: {.reason} {.message}{"\n"}{end}' >&2 || true
        return 1
        ;;
    esac
    sleep "$poll_s"
    waited=$((waited + poll_s))
  done
  echo "run-nightly: job/$job did not finish within $timeout_s s" >&2
  return 1
}

kc apply -f "$here/serviceaccount.yaml" -f "$here/configmap.yaml"

started=false
for stage in "${stages[@]}"; do
  [[ $stage == "$start_at" ]] && started=true
  $started || continue
  job="lakescale-$stage-$run_id"
  # A Job's pod template cannot be changed, so a stage run again replaces
  # its Job; its shards write the same files and results as before.
  kc delete job "$job" --ignore-not-found --wait=true
  sed "s/RUN_ID/$run_id/g" "$here/$stage.yaml" | kc apply -f -
  echo "run-nightly: waiting for job/$job"
  wait_job "$job"
done
echo "run-nightly: night $run_id committed"
