package main

import (
	"fmt"
	"os"

	"github.com/urfave/cli/v2"

	"github.com/lakescale/lakescale/jobs"
)

// usageError is a command-line mistake: exit code 2.
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

const exitCodesHelp = `Exit codes: 0 success, 1 the job failed (nothing committed), 2 usage error, 130 interrupted.`

var (
	inputFlag   = &cli.StringFlag{Name: "input", Aliases: []string{"i"}, Usage: "input dataset `DIR` (Parquet files, flat or Hive key=value folders)"}
	outputFlag  = &cli.StringFlag{Name: "output", Aliases: []string{"o"}, Usage: "output dataset `DIR` (absent or empty unless --overwrite)"}
	jobFlag     = &cli.StringFlag{Name: "job", Usage: "TOML job `FILE`; flags override it"}
	columnsFlag = &cli.StringSliceFlag{Name: "columns", Usage: "scale the numeric columns matching `PATTERN,...` (glob; default every integer and float column)"}
	excludeFlag = &cli.StringSliceFlag{Name: "exclude", Usage: "leave the columns matching `PATTERN,...` unscaled"}
	methodFlag  = &cli.StringFlag{Name: "method", Usage: "scaling `METHOD`: zscore, minmax, meannorm, maxabs or none (default zscore)"}
	stdFlag     = &cli.StringFlag{Name: "std", Usage: "standard deviation for zscore: `population` (divide by n, default) or sample (n-1)"}
	workersFlag = &cli.IntFlag{Name: "workers", Usage: "files processed at once (default: number of CPUs)"}
	overFlag    = &cli.BoolFlag{Name: "overwrite", Usage: "replace a committed dataset in the output directory"}
	compFlag    = &cli.StringFlag{Name: "compression", Usage: "output `CODEC`: zstd (default), snappy or none"}
	typeFlag    = &cli.StringFlag{Name: "output-type", Usage: "type of scaled columns: float64 (default) or float32"}
	infFlag     = &cli.StringFlag{Name: "on-infinity", Usage: "an infinite value in a selected column: error (default) or skip (count it, leave it out of the statistics)"}
	statsFlag   = &cli.StringFlag{Name: "stats", Usage: "statistics `FILE` to write"}
	paramsFlag  = &cli.StringFlag{Name: "params", Usage: "manifest or statistics `FILE` to take parameters from"}

	fitFlag       = &cli.StringFlag{Name: "fit", Usage: "statistics from the inputs whose partitions match `FILTER` only, e.g. split=train or day>=2026-01-01 (conditions joined by ','; every input is still written)"}
	cacheFlag     = &cli.StringFlag{Name: "cache", Usage: "statistics cache `DIR` (default OUTPUT/_cache for run, none for measure)"}
	noCacheFlag   = &cli.BoolFlag{Name: "no-cache", Usage: "measure every file instead of reusing cached statistics (the cache is rewritten)"}
	logFlag       = &cli.StringFlag{Name: "log-format", Usage: "log a line per phase and a summary on stderr, as `FORMAT` text or json"}
	metricsFlag   = &cli.StringFlag{Name: "metrics", Usage: "after a success, write Prometheus text-format metrics to `FILE` (atomically)"}
	jsonFlag      = &cli.BoolFlag{Name: "json", Usage: "write the report as JSON"}
	failOverFlag  = &cli.Float64Flag{Name: "fail-over", Usage: "exit 1 when a column's mean moved by more than `X` old standard deviations"}
	invertColFlag = &cli.StringSliceFlag{Name: "columns", Usage: "map back the columns matching `PATTERN,...` (default every column of the parameters)"}
	columnFlag    = &cli.StringFlag{Name: "column", Usage: "map back the numbers on stdin (one per line) for column `NAME`"}

	shardFlag  = &cli.StringFlag{Name: "shard", Usage: "work on shard `I/N` of the inputs only (0 <= I < N), or env: I from JOB_COMPLETION_INDEX (Kubernetes indexed Job) or else SLURM_ARRAY_TASK_ID (Slurm job array), N from --shards"}
	shardsFlag = &cli.IntFlag{Name: "shards", Usage: "number of shards `N`, with --shard env"}
	workFlag   = &cli.StringFlag{Name: "work", Usage: "work `DIR` where the shards of one job leave their results for merge or commit"}
	commitFlag = &cli.StringFlag{Name: outputFlag.Name, Aliases: outputFlag.Aliases, Usage: "output dataset `DIR` the apply shards wrote into"}
)

func newApp() *cli.App {
	app := &cli.App{
		Name:            "lakescale",
		Usage:           "feature-scale numeric columns of partitioned Parquet datasets with exact statistics",
		Description:     exitCodesHelp,
		HideHelpCommand: false,
		ExitErrHandler:  func(*cli.Context, error) {},
		OnUsageError:    onUsageError,
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usageError{fmt.Errorf("unknown command %q", c.Args().First())}
			}
			_ = cli.ShowAppHelp(c)
			return usageError{fmt.Errorf("no command given")}
		},
		Commands: []*cli.Command{
			{
				Name:  "run",
				Usage: "measure exact statistics, then write scaled copies and a manifest",
				UsageText: "lakescale run --input DIR --output DIR [--job FILE] [--columns PATTERN,...] [--method M] [--std sample|population] [--workers N] [--overwrite]\n" +
					"    [--fit FILTER] [--cache DIR] [--no-cache] [--log-format text|json] [--metrics FILE]",
				Flags: []cli.Flag{inputFlag, outputFlag, jobFlag, columnsFlag, excludeFlag, methodFlag, stdFlag, workersFlag, overFlag, compFlag, typeFlag, infFlag,
					fitFlag, cacheFlag, noCacheFlag, logFlag, metricsFlag},
				Action: func(c *cli.Context) error {
					cfg, err := config(c)
					if err != nil {
						return err
					}
					return jobs.Run(c.Context, cfg)
				},
			},
			{
				Name:  "measure",
				Usage: "pass one only: write the merged statistics (and fitted parameters) to a file",
				UsageText: "lakescale measure --input DIR --stats FILE [--job FILE] [--columns PATTERN,...] [--method M] [--std sample|population] [--workers N]\n" +
					"    [--fit FILTER] [--cache DIR] [--no-cache] [--log-format text|json] [--metrics FILE]\n" +
					"lakescale measure --input DIR --shard I/N|env [--shards N] --work DIR [same flags but --stats]   # one shard; then lakescale merge",
				Flags: []cli.Flag{inputFlag, statsFlag, jobFlag, columnsFlag, excludeFlag, methodFlag, stdFlag, workersFlag, infFlag,
					fitFlag, cacheFlag, noCacheFlag, logFlag, metricsFlag, shardFlag, shardsFlag, workFlag},
				Action: func(c *cli.Context) error {
					cfg, err := config(c)
					if err != nil {
						return err
					}
					cfg.StatsPath = c.String(statsFlag.Name)
					if sh, err := shardOf(c); err != nil || sh != nil {
						if err != nil {
							return err
						}
						return jobs.MeasureShard(c.Context, cfg, *sh)
					}
					return jobs.Measure(c.Context, cfg)
				},
			},
			{
				Name:  "apply",
				Usage: "pass two only: write scaled copies with parameters from a manifest or statistics file",
				UsageText: "lakescale apply --input DIR --output DIR --params FILE [--workers N] [--overwrite] [--log-format text|json] [--metrics FILE]\n" +
					"lakescale apply --input DIR --output DIR --params FILE --shard I/N|env [--shards N] --work DIR [--workers N]   # one shard; then lakescale commit",
				Flags: []cli.Flag{inputFlag, outputFlag, paramsFlag, jobFlag, workersFlag, overFlag, compFlag, typeFlag, infFlag, logFlag, metricsFlag,
					shardFlag, shardsFlag, workFlag},
				Action: func(c *cli.Context) error {
					cfg, err := config(c)
					if err != nil {
						return err
					}
					cfg.ParamsPath = c.String(paramsFlag.Name)
					if sh, err := shardOf(c); err != nil || sh != nil {
						if err != nil {
							return err
						}
						return jobs.ApplyShard(c.Context, cfg, *sh)
					}
					return jobs.Apply(c.Context, cfg)
				},
			},
			{
				Name:      "merge",
				Usage:     "combine the results of every measure shard into the statistics file one measure would write",
				UsageText: "lakescale merge --work DIR --stats FILE [--log-format text|json] [--metrics FILE]",
				Flags:     []cli.Flag{workFlag, statsFlag, logFlag, metricsFlag},
				Action: func(c *cli.Context) error {
					cfg, err := config(c)
					if err != nil {
						return err
					}
					cfg.StatsPath = c.String(statsFlag.Name)
					return jobs.MergeShards(c.Context, cfg, c.String(workFlag.Name))
				},
			},
			{
				Name:      "commit",
				Usage:     "check the outputs of every apply shard and write the manifest one apply would write",
				UsageText: "lakescale commit --output DIR --work DIR [--log-format text|json] [--metrics FILE]",
				Flags:     []cli.Flag{commitFlag, workFlag, logFlag, metricsFlag},
				Action: func(c *cli.Context) error {
					cfg, err := config(c)
					if err != nil {
						return err
					}
					return jobs.CommitShards(c.Context, cfg, c.String(workFlag.Name))
				},
			},
			{
				Name:      "show",
				Usage:     "print a manifest or statistics file as a table",
				ArgsUsage: "FILE",
				Action: func(c *cli.Context) error {
					path, err := oneArg(c, "FILE")
					if err != nil {
						return err
					}
					return jobs.Show(c.App.Writer, path)
				},
			},
			{
				Name:      "verify",
				Usage:     "re-hash every output file and check it against DIR/_manifest.json",
				ArgsUsage: "DIR",
				Action: func(c *cli.Context) error {
					dir, err := oneArg(c, "DIR")
					if err != nil {
						return err
					}
					return jobs.Verify(c.Context, c.App.Writer, dir)
				},
			},
			{
				Name:      "demo",
				Usage:     "write an invented wind-turbine telemetry lake under DIR (default lakescale-demo) and scale it",
				ArgsUsage: "[DIR]",
				Flags:     []cli.Flag{workersFlag},
				Action: func(c *cli.Context) error {
					if c.NArg() > 1 {
						return usageError{fmt.Errorf("demo takes at most one DIR, got %d arguments", c.NArg())}
					}
					dir := c.Args().First()
					if dir == "" {
						dir = "lakescale-demo"
					}
					return jobs.Demo(c.Context, dir, jobs.Config{Workers: c.Int(workersFlag.Name), Version: version, Out: c.App.Writer})
				},
			},
			{
				Name:      "diff",
				Usage:     "compare the column statistics of two manifests or statistics files (drift)",
				UsageText: "lakescale diff [--json] [--fail-over X] OLD NEW",
				Flags:     []cli.Flag{jsonFlag, failOverFlag},
				Action: func(c *cli.Context) error {
					if c.NArg() != 2 {
						return usageError{fmt.Errorf("diff takes OLD and NEW (flags go before them), got %d arguments", c.NArg())}
					}
					opts := jobs.DiffOptions{JSON: c.Bool(jsonFlag.Name)}
					if c.IsSet(failOverFlag.Name) {
						x := c.Float64(failOverFlag.Name)
						opts.FailOver = &x
					}
					return jobs.Diff(c.App.Writer, c.Args().Get(0), c.Args().Get(1), opts)
				},
			},
			{
				Name:  "invert",
				Usage: "map scaled values back to original units: a dataset or file, or numbers on stdin",
				UsageText: "lakescale invert --params FILE --input DIR|FILE --output DIR [--columns PATTERN,...] [--workers N] [--overwrite]\n" +
					"lakescale invert --params FILE --column NAME < scaled.txt",
				Flags: []cli.Flag{paramsFlag, inputFlag, outputFlag, invertColFlag, columnFlag, workersFlag, overFlag, compFlag, logFlag, metricsFlag},
				Action: func(c *cli.Context) error {
					if c.IsSet(columnFlag.Name) {
						if c.IsSet(inputFlag.Name) || c.IsSet(outputFlag.Name) || c.IsSet(invertColFlag.Name) || c.NArg() > 0 {
							return usageError{fmt.Errorf("--column maps numbers from stdin; it takes no --input, --output, --columns or arguments")}
						}
						return jobs.InvertValues(c.App.Reader, c.App.Writer, c.String(paramsFlag.Name), c.String(columnFlag.Name))
					}
					cfg, err := config(c)
					if err != nil {
						return err
					}
					cfg.ParamsPath = c.String(paramsFlag.Name)
					return jobs.Invert(c.Context, cfg, c.StringSlice(invertColFlag.Name))
				},
			},
			{
				Name:  "version",
				Usage: "print the program version",
				Action: func(c *cli.Context) error {
					_, err := fmt.Fprintln(c.App.Writer, jobs.Version(version))
					return err
				},
			},
		},
	}
	addStorage(app)
	for _, cmd := range app.Commands {
		cmd.Description = exitCodesHelp
		cmd.OnUsageError = onUsageError
	}
	return app
}

func onUsageError(_ *cli.Context, err error, _ bool) error { return usageError{err} }

func oneArg(c *cli.Context, name string) (string, error) {
	if c.NArg() != 1 {
		return "", usageError{fmt.Errorf("%s takes exactly one %s argument, got %d", c.Command.Name, name, c.NArg())}
	}
	return c.Args().First(), nil
}

// config turns the flags a command has into a jobs.Config.
func config(c *cli.Context) (jobs.Config, error) {
	if c.NArg() > 0 {
		return jobs.Config{}, usageError{fmt.Errorf("unexpected argument %q", c.Args().First())}
	}
	str := func(f *cli.StringFlag) *string {
		if !c.IsSet(f.Name) {
			return nil
		}
		v := c.String(f.Name)
		return &v
	}
	o := jobs.Overrides{
		Input: str(inputFlag), Output: str(outputFlag), Method: str(methodFlag), Std: str(stdFlag),
		Compression: str(compFlag), OutputType: str(typeFlag), OnInfinity: str(infFlag),
		Overwrite: c.Bool(overFlag.Name), Fit: str(fitFlag),
	}
	if c.IsSet(columnsFlag.Name) {
		o.Columns = c.StringSlice(columnsFlag.Name)
	}
	if c.IsSet(excludeFlag.Name) {
		o.Exclude = c.StringSlice(excludeFlag.Name)
	}
	if c.IsSet(workersFlag.Name) {
		n := c.Int(workersFlag.Name)
		o.Workers = &n
	}
	cfg, err := jobs.Load(c.String(jobFlag.Name), o)
	if err != nil {
		return jobs.Config{}, err
	}
	cfg.Version, cfg.Out, cfg.Log = version, c.App.Writer, c.App.ErrWriter
	cfg.CacheDir, cfg.NoCache = c.String(cacheFlag.Name), c.Bool(noCacheFlag.Name)
	cfg.LogFormat, cfg.MetricsPath = c.String(logFlag.Name), c.String(metricsFlag.Name)
	cfg.SkipCommitCheck = c.Bool(skipCheckFlag.Name)
	return cfg, nil
}

// shardOf resolves --shard, --shards and --work; nil when none is given.
func shardOf(c *cli.Context) (*jobs.Shard, error) {
	if !c.IsSet(shardFlag.Name) && !c.IsSet(shardsFlag.Name) && !c.IsSet(workFlag.Name) {
		return nil, nil
	}
	var n *int
	if c.IsSet(shardsFlag.Name) {
		v := c.Int(shardsFlag.Name)
		n = &v
	}
	sh, err := jobs.ParseShard(c.String(shardFlag.Name), n, c.String(workFlag.Name), os.Getenv)
	if err != nil {
		return nil, err
	}
	return &sh, nil
}
