package main

import (
	"encoding/json"
	"errors"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/rogpeppe/go-internal/testscript"
)

// cmdExitCode runs a program like exec and asserts its exit status (any:
// whatever it is, for a script that asserts only what the run leaves
// behind); its stdout and stderr are kept for the stdout and stderr
// commands.
//
//	exitcode N|any PROG [ARGS...]
func cmdExitCode(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "exitcode")
	if len(args) < 2 {
		ts.Fatalf("usage: exitcode N|any PROG [ARGS...]")
	}
	want := -1
	if args[0] != "any" {
		var err error
		want, err = strconv.Atoi(args[0])
		ts.Check(err)
	}
	err := ts.Exec(args[1], args[2:]...)
	got := 0
	if err != nil {
		var ee *exec.ExitError
		if !errors.As(err, &ee) {
			ts.Fatalf("%s: %v", args[1], err)
		}
		got = ee.ExitCode()
	}
	if want >= 0 && got != want {
		ts.Fatalf("%s exited with status %d, want %d", args[1], got, want)
	}
	ts.Logf("exit status %d", got)
}

// committedParquet reports how many *.parquet files under dir have their
// final names (temporary files start with '.').
func committedParquet(dir string) int {
	n := 0
	_ = filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err == nil && d.Type().IsRegular() && strings.HasSuffix(d.Name(), ".parquet") && !strings.HasPrefix(d.Name(), ".") {
			n++
		}
		return nil
	})
	return n
}

// cmdInterrupt starts PROG in the background, waits until its first output
// file appears under DIR with its final name (so pass two is under way),
// or with WHEN exists=PATH until PATH exists, sends the signal and asserts
// how the program ended: WANT is an exit status, or "killed" for death by
// the signal. The program's stdout and stderr are kept for the stdout and
// stderr commands.
//
//	interrupt INT|TERM|KILL WANT DIR|exists=PATH PROG [ARGS...]
func cmdInterrupt(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "interrupt")
	if len(args) < 4 {
		ts.Fatalf("usage: interrupt INT|TERM|KILL WANT DIR|exists=PATH|s3://bucket/prefix PROG [ARGS...]")
	}
	var sig os.Signal
	switch args[0] {
	case "INT":
		sig = os.Interrupt
	case "TERM":
		sig = syscall.SIGTERM
	case "KILL":
		sig = os.Kill
	default:
		ts.Fatalf("interrupt: unknown signal %q", args[0])
	}
	ready := func() bool { return committedParquet(ts.MkAbs(args[2])) > 0 }
	if path, ok := strings.CutPrefix(args[2], "exists="); ok {
		ready = func() bool { return exists(ts.MkAbs(path)) }
	}
	if strings.HasPrefix(args[2], "s3://") {
		ready = func() bool { return s3ParquetCount(ts, args[2]) > 0 }
	}
	prog, err := exec.LookPath(args[3]) // testscript put lakescale on this process's PATH
	ts.Check(err)
	cmd := exec.Command(prog, args[4:]...)
	cmd.Dir = ts.MkAbs(".")
	cmd.Env = append(os.Environ(), "PWD="+cmd.Dir)
	cmd.Env = append(cmd.Env, s3Env(ts)...)
	var stdout, stderr strings.Builder
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	ts.Check(cmd.Start())
	done := make(chan error, 1)
	go func() { done <- cmd.Wait() }()

	deadline := time.After(60 * time.Second)
poll:
	for {
		select {
		case <-done:
			ts.Fatalf("%s ended before %s was ready\n[stdout]\n%s[stderr]\n%s", args[3], args[2], stdout.String(), stderr.String())
		case <-deadline:
			_ = cmd.Process.Kill()
			<-done
			ts.Fatalf("%s was not ready within 60s", args[2])
		case <-time.After(time.Millisecond):
			if ready() {
				break poll
			}
		}
	}
	ts.Check(cmd.Process.Signal(sig))
	<-done
	ts.Logf("sent SIG%s once %s was ready; %s", args[0], args[2], cmd.ProcessState)
	ts.Stdout().Write([]byte(stdout.String()))
	ts.Stderr().Write([]byte(stderr.String()))

	got := cmd.ProcessState.ExitCode()
	switch {
	case args[1] == "killed":
		if got != -1 {
			ts.Fatalf("%s: %s, want killed by SIG%s", args[3], cmd.ProcessState, args[0])
		}
	default:
		want, err := strconv.Atoi(args[1])
		ts.Check(err)
		if got != want {
			ts.Fatalf("%s: %s, want exit status %d", args[3], cmd.ProcessState, want)
		}
	}
}

// cmdNoTemps asserts that no temporary file of the atomic writers
// (".<name>.tmp-*") is left under DIR; with !, that there is one.
//
//	no-temps DIR
func cmdNoTemps(ts *testscript.TestScript, neg bool, args []string) {
	if len(args) != 1 {
		ts.Fatalf("usage: no-temps DIR")
	}
	var temps []string
	err := filepath.WalkDir(ts.MkAbs(args[0]), func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if ok, _ := filepath.Match(".*.tmp-*", d.Name()); ok {
			temps = append(temps, p)
		}
		return nil
	})
	ts.Check(err)
	if (len(temps) == 0) == neg {
		if neg {
			ts.Fatalf("no temporary files under %s", args[0])
		}
		ts.Fatalf("temporary files left under %s: %q", args[0], temps)
	}
}

// cmdLock writes a lock file as a lakescale run holding an output would,
// for a holder that is alive (this test process), dead (a process that
// has exited), on another host, or an unreadable file.
//
//	lock FILE live|dead|foreign|garbage
func cmdLock(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "lock")
	if len(args) != 2 {
		ts.Fatalf("usage: lock FILE live|dead|foreign|garbage")
	}
	host, err := os.Hostname()
	ts.Check(err)
	pid := os.Getpid()
	switch args[1] {
	case "live":
	case "dead":
		// A process that has exited: its pid is free (reuse within
		// moments is vanishingly unlikely).
		prog, err := exec.LookPath("lakescale")
		ts.Check(err)
		cmd := exec.Command(prog, "version")
		ts.Check(cmd.Run())
		pid = cmd.ProcessState.Pid()
	case "foreign":
		host = "elsewhere.invalid"
	case "garbage":
		ts.Check(os.WriteFile(ts.MkAbs(args[0]), []byte("not a lock\n"), 0o644))
		return
	default:
		ts.Fatalf("lock: unknown holder %q", args[1])
	}
	data, err := json.Marshal(map[string]any{"pid": pid, "host": host, "started": "2026-01-02T03:04:05Z"})
	ts.Check(err)
	ts.Check(os.MkdirAll(filepath.Dir(ts.MkAbs(args[0])), 0o755))
	ts.Check(os.WriteFile(ts.MkAbs(args[0]), append(data, '\n'), 0o644))
	ts.Setenv("LOCKPID", strconv.Itoa(pid))
}
