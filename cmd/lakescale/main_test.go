package main

import (
	"flag"
	"os"
	"path/filepath"
	"testing"

	"github.com/rogpeppe/go-internal/testscript"
)

// update rewrites the expected output in the scripts (the second argument
// of a failing cmp) instead of failing: go test ./cmd/lakescale -update
var update = flag.Bool("update", false, "update testscript files in testdata/script with the actual output")

// TestMain installs the lakescale program for the scripts: exec lakescale
// re-runs this test binary, which then behaves as the real command.
func TestMain(m *testing.M) {
	testscript.Main(m, map[string]func(){"lakescale": main})
}

// nistDir is testdata/nist as an absolute path; custom commands run in
// the test process, whose working directory is this package.
var nistDir = func() string {
	d, err := filepath.Abs(filepath.Join("testdata", "nist"))
	if err != nil {
		panic(err)
	}
	return d
}()

// TestScripts runs the end-to-end scenarios in testdata/script/*.txtar.
// Run one with: go test ./cmd/lakescale -run TestScripts/NAME
//
// Commands besides testscript's own (all run inside the test process):
//
//	gen-lake DIR [-sites a,b] [-days 1,2] [-parts N] [-rows N] [-rowgroup N] [-seed N]
//	         [-inf REL] [-drop REL:COL] [-retype REL:COL] [-empty REL] [-set COL=VALUE]
//	gen-nist NAME DIR PARTS
//	gen-types DIR FILES ROWS
//	check-output IN OUT
//	check-stats IN MANIFEST
//	col-stat OUT COLUMN min|max|absmax|range|mean|std WANT TOL
//	manifest-field FILE PATH WANT
//	manifest-lre FILE PATH CERTIFIED DIGITS
//	sha256-of FILE PATH TARGET
//	cmp-manifest [-fields a,b] [-ignore columns[].x,...] A B
//	cmp-tree A B
//	corrupt FILE truncate|garbage|append|flip
//	exitcode N|any PROG [ARGS...]
//	interrupt INT|TERM|KILL WANT DIR|exists=PATH PROG [ARGS...]
//	no-temps DIR
//	lock FILE live|dead|foreign|garbage
//	check-inverted SCALED BACK [ORIG]
//	check-invert-values MANIFEST COLUMN IN OUT
//	check-diff OLD NEW REPORT
//	json-lines FILE KEY=VALUE...
//	check-shards WORK measure|apply N
//	s3-server [-no-conditional] BUCKET...   (see s3_cmds_test.go)
//	s3-put DIR s3://bucket/prefix
//	s3-get s3://bucket/prefix DIR
//	s3-ls s3://bucket/prefix
//	s3-rm s3://bucket/key...
func TestScripts(t *testing.T) {
	testscript.Run(t, testscript.Params{
		Dir:                 filepath.Join("testdata", "script"),
		RequireExplicitExec: true,
		UpdateScripts:       *update,
		Cmds: map[string]func(ts *testscript.TestScript, neg bool, args []string){
			"gen-lake":            cmdGenLake,
			"gen-nist":            cmdGenNIST,
			"gen-types":           cmdGenTypes,
			"check-output":        cmdCheckOutput,
			"check-stats":         cmdCheckStats,
			"col-stat":            cmdColStat,
			"manifest-field":      cmdManifestField,
			"manifest-lre":        cmdManifestLRE,
			"sha256-of":           cmdSHA256Of,
			"cmp-manifest":        cmdCmpManifest,
			"cmp-tree":            cmdCmpTree,
			"corrupt":             cmdCorrupt,
			"exitcode":            cmdExitCode,
			"interrupt":           cmdInterrupt,
			"no-temps":            cmdNoTemps,
			"lock":                cmdLock,
			"check-inverted":      cmdCheckInverted,
			"check-invert-values": cmdCheckInvertValues,
			"check-diff":          cmdCheckDiff,
			"json-lines":          cmdJSONLines,
			"check-shards":        cmdCheckShards,
			"s3-server":           cmdS3Server,
			"s3-put":              cmdS3Put,
			"s3-get":              cmdS3Get,
			"s3-ls":               cmdS3Ls,
			"s3-rm":               cmdS3Rm,
		},
		Setup: func(env *testscript.Env) error {
			// A fixed zone keeps any local-time rendering stable.
			env.Setenv("TZ", "UTC")
			return nil
		},
	})
}

// noNeg fails a command that has no negated form.
func noNeg(ts *testscript.TestScript, neg bool, name string) {
	if neg {
		ts.Fatalf("unsupported: ! %s", name)
	}
}

// exists reports whether a path exists.
func exists(path string) bool {
	_, err := os.Stat(path)
	return err == nil
}
