package main

import (
	"slices"

	"github.com/urfave/cli/v2"

	"github.com/lakescale/lakescale/jobs"
)

// Object-store flags, accepted by every command that reads or writes
// locations.
var (
	s3EndpointFlag  = &cli.StringFlag{Name: "s3-endpoint", EnvVars: []string{"AWS_ENDPOINT_URL_S3", "AWS_ENDPOINT_URL"}, Usage: "`URL` of an S3-compatible object store for s3:// locations (default AWS)"}
	s3PathStyleFlag = &cli.BoolFlag{Name: "s3-path-style", EnvVars: []string{"LAKESCALE_S3_PATH_STYLE"}, Usage: "address buckets as ENDPOINT/bucket/key (most S3-compatible stores need this)"}
	s3RegionFlag    = &cli.StringFlag{Name: "s3-region", Usage: "`REGION` of s3:// locations (default: the AWS SDK's region chain, else us-east-1)"}
	skipCheckFlag   = &cli.BoolFlag{Name: "skip-commit-check", Usage: "run even if the output's store does not refuse a second create of the same object (only safe when one run at a time writes there)"}
)

// commitCommands are the commands that commit a dataset and so check the
// output's store at start-up, and clean, which takes the output's lock
// the same way.
var commitCommands = []string{"run", "apply", "commit", "invert", "clean"}

// addStorage gives every command except version the object-store flags,
// applied before the command runs, the commit commands --skip-commit-check,
// and adds the clean command.
func addStorage(app *cli.App) {
	app.Commands = append(app.Commands, cleanCommand())
	for _, cmd := range app.Commands {
		if cmd.Name == "version" || cmd.Name == "help" {
			continue
		}
		cmd.Flags = append(cmd.Flags, s3EndpointFlag, s3PathStyleFlag, s3RegionFlag)
		if slices.Contains(commitCommands, cmd.Name) {
			cmd.Flags = append(cmd.Flags, skipCheckFlag)
		}
		before := cmd.Before
		cmd.Before = func(c *cli.Context) error {
			jobs.SetStorage(jobs.Storage{
				Endpoint:  c.String(s3EndpointFlag.Name),
				PathStyle: c.Bool(s3PathStyleFlag.Name),
				Region:    c.String(s3RegionFlag.Name),
			})
			if before != nil {
				return before(c)
			}
			return nil
		}
	}
}

func cleanCommand() *cli.Command {
	return &cli.Command{
		Name:  "clean",
		Usage: "remove what failed or killed runs left in an output DIR (never a committed dataset's files)",
		UsageText: "lakescale clean [--log-format text|json] DIR   (flags before DIR)\n\n" +
			"   Removes temporary files and incomplete uploads; in an uncommitted output (no _manifest.json)\n" +
			"   also every Parquet file and the _uncommitted marker. Refuses a DIR lakescale did not write.",
		Flags: []cli.Flag{logFlag},
		Action: func(c *cli.Context) error {
			dir, err := oneArg(c, "DIR")
			if err != nil {
				return err
			}
			cfg, err := jobs.Load("", jobs.Overrides{Output: &dir})
			if err != nil {
				return err
			}
			cfg.Version, cfg.Out, cfg.Log = version, c.App.Writer, c.App.ErrWriter
			cfg.LogFormat = c.String(logFlag.Name)
			cfg.SkipCommitCheck = c.Bool(skipCheckFlag.Name)
			return jobs.Clean(c.Context, cfg)
		},
	}
}
