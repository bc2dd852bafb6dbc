// Command run is `make bench`: it generates the benchmark lake once (with
// bench/lakegen, into a cache folder), then times, interleaved and
// repeated, at each thread count:
//
//	read floor    floors read: pqarrow decode of the scaled columns
//	pass one      lakescale measure
//	peer stats    DuckDB's statistics query alone (context for pass one)
//	write floor   floors copy: read every column, re-write unchanged
//	pass two      lakescale apply (pass two from a statistics file; apply
//	              also hashes each input and counts values outside the
//	              fitted range, which run's pass two does not)
//	full run      lakescale run
//	peer          DuckDB: statistics, then COPY of the z-scored columns
//
// Every job is a child process; wall time is measured around it, CPU time
// and peak RSS come from its rusage (wait4). It prints medians, rows/s and
// MB/s (input bytes on disk per second of wall time), peak RSS (the
// largest of the repetitions), the ratios of the speed issue's goals, and
// the checks: lakescale's statistics against DuckDB's, byte-identical
// outputs across repetitions and worker counts, the output's size against
// Arrow's default writer, and a read of an output with the independent
// reader github.com/xitongsys/parquet-go.
//
// The lake stays in the page cache between jobs (the machine has far more
// memory than the lake), so these are warm-cache, CPU-bound timings. Each
// full run starts from an empty output folder, so its statistics cache
// (OUTPUT/_cache) is cold: every file is measured.
package main

import (
	"bytes"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"slices"
	"strconv"
	"strings"
	"syscall"
	"time"

	"github.com/lakescale/lakescale/manifests"
)

type sample struct {
	wall, cpu float64 // seconds
	rssMiB    float64
}

type job struct {
	name string
	args func(t int) []string // argv; args[0] is a binary path
	out  func(t int) string   // output folder, removed before each run ("" none)
}

func main() {
	rows := flag.Int64("rows", envInt("BENCH_ROWS", 20_000_000), "rows in the lake (env BENCH_ROWS)")
	reps := flag.Int("reps", int(envInt("BENCH_REPS", 3)), "repetitions (env BENCH_REPS)")
	threadsFlag := flag.String("threads", envStr("BENCH_THREADS", "1,2"), "thread / worker counts (env BENCH_THREADS)")
	cache := flag.String("cache", envStr("BENCH_CACHE", ".bench-cache"), "cache folder for the lake and outputs (env BENCH_CACHE)")
	bin := flag.String("bin", "bin/bench", "folder with lakescale, lakegen, floors and peer")
	only := flag.String("jobs", envStr("BENCH_JOBS", ""), "comma-separated job names to run (default all; env BENCH_JOBS)")
	flag.Parse()
	var threads []int
	for _, s := range strings.Split(*threadsFlag, ",") {
		t, err := strconv.Atoi(strings.TrimSpace(s))
		if err != nil || t < 1 {
			fatalf("bad -threads %q", *threadsFlag)
		}
		threads = append(threads, t)
	}
	b := func(name string) string { return filepath.Join(*bin, name) }
	lake := filepath.Join(*cache, fmt.Sprintf("lake-%d", *rows))
	// Outputs and statistics files of this run only: a file left by an
	// earlier run (another lake size, another job list) must not be checked.
	work := filepath.Join(*cache, fmt.Sprintf("work-%d", *rows))
	must(os.RemoveAll(work))
	must(os.MkdirAll(work, 0o755))
	w := func(name string, t int) string { return filepath.Join(work, fmt.Sprintf("%s-%d", name, t)) }

	must(runQuiet(b("lakegen"), "-dir", lake, "-rows", strconv.FormatInt(*rows, 10)))
	colsOut, err := exec.Command(b("lakegen"), "-columns").Output()
	must(err)
	cols := strings.TrimSpace(string(colsOut))
	lakeBytes := treeBytes(lake)

	// pass two reads parameters from a statistics file made here, untimed.
	for _, t := range threads {
		must(runQuiet(b("lakescale"), "measure", "--input", lake, "--stats", w("params", t)+".json", "--exclude", "ts_unix", "--workers", "1"))
	}
	ts := func(t int) string { return strconv.Itoa(t) }
	jobs := []job{
		{"read floor", func(t int) []string {
			return []string{b("floors"), "read", "-input", lake, "-columns", cols, "-workers", ts(t)}
		}, nil},
		{"pass one", func(t int) []string {
			return []string{b("lakescale"), "measure", "--input", lake, "--stats", w("stats", t) + ".json", "--exclude", "ts_unix", "--workers", ts(t)}
		}, nil},
		{"peer stats", func(t int) []string {
			return []string{b("peer"), "-input", lake, "-columns", cols, "-threads", ts(t), "-stats-only"}
		}, nil},
		{"write floor", func(t int) []string {
			return []string{b("floors"), "copy", "-input", lake, "-output", w("copy", t), "-workers", ts(t)}
		}, func(t int) string { return w("copy", t) }},
		{"pass two", func(t int) []string {
			return []string{b("lakescale"), "apply", "--input", lake, "--output", w("apply", t), "--params", w("params", t) + ".json", "--workers", ts(t)}
		}, func(t int) string { return w("apply", t) }},
		{"full run", func(t int) []string {
			return []string{b("lakescale"), "run", "--input", lake, "--output", w("run", t), "--exclude", "ts_unix", "--workers", ts(t)}
		}, func(t int) string { return w("run", t) }},
		{"peer", func(t int) []string {
			return []string{b("peer"), "-input", lake, "-output", w("peer", t), "-columns", cols, "-threads", ts(t), "-stats", w("peer-stats", t) + ".json"}
		}, func(t int) string { return w("peer", t) }},
	}
	if *only != "" {
		keep := strings.Split(*only, ",")
		jobs = slices.DeleteFunc(jobs, func(j job) bool { return !slices.Contains(keep, j.name) })
	}

	fmt.Printf("machine: %s, %d CPUs, %s; load average at start: %s\n", cpuModel(), runtime.NumCPU(), memTotal(), loadAvg())
	fmt.Printf("lake: %s: %d rows, %.0f MB on disk; %d repetitions, threads %v\n\n", lake, *rows, float64(lakeBytes)/1e6, *reps, threads)

	samples := map[string][]sample{} // key: name/threads
	hashes := map[int][]string{}     // full-run output hashes by threads
	var firstHashes []string
	deterministic := true
	for rep := range *reps {
		for _, t := range threads {
			for _, j := range jobs {
				if j.out != nil {
					must(os.RemoveAll(j.out(t)))
				}
				s, err := timeCmd(j.args(t))
				if err != nil {
					fatalf("%s (threads %d): %v", j.name, t, err)
				}
				key := fmt.Sprintf("%s/%d", j.name, t)
				samples[key] = append(samples[key], s)
				fmt.Fprintf(os.Stderr, "rep %d threads %d %-12s wall %7.2fs cpu %7.2fs rss %6.0f MiB\n", rep+1, t, j.name, s.wall, s.cpu, s.rssMiB)
				if j.name == "full run" {
					h := outputHashes(filepath.Join(w("run", t), "_manifest.json"))
					hashes[t] = h
					if firstHashes == nil {
						firstHashes = h
					} else if !slices.Equal(h, firstHashes) {
						deterministic = false
					}
				}
			}
		}
	}

	med := func(name string, t int) (sample, bool) {
		ss := samples[fmt.Sprintf("%s/%d", name, t)]
		if len(ss) == 0 {
			return sample{}, false
		}
		walls := make([]float64, len(ss))
		cpus := make([]float64, len(ss))
		var rss float64
		for i, s := range ss {
			walls[i], cpus[i], rss = s.wall, s.cpu, max(rss, s.rssMiB)
		}
		return sample{median(walls), median(cpus), rss}, true
	}

	var out bytes.Buffer
	fmt.Fprintf(&out, "| job | threads | wall s (median) | CPU s (median) | M rows/s | MB/s | peak RSS MiB |\n|---|---|---|---|---|---|---|\n")
	for _, t := range threads {
		for _, j := range jobs {
			s, ok := med(j.name, t)
			if !ok {
				continue
			}
			fmt.Fprintf(&out, "| %s | %d | %.2f | %.2f | %.2f | %.0f | %.0f |\n", j.name, t, s.wall, s.cpu,
				float64(*rows)/s.wall/1e6, float64(lakeBytes)/s.wall/1e6, s.rssMiB)
		}
	}
	fmt.Fprintf(&out, "\n| ratio (goal) | threads | wall | CPU | met (wall) |\n|---|---|---|---|---|\n")
	ratio := func(label, a, b string, goal float64, atMost bool) {
		for _, t := range threads {
			x, ok1 := med(a, t)
			y, ok2 := med(b, t)
			if !ok1 || !ok2 {
				continue
			}
			r, rc := x.wall/y.wall, x.cpu/y.cpu
			met := r <= goal
			if !atMost {
				met = r >= goal
			}
			fmt.Fprintf(&out, "| %s | %d | %.2f | %.2f | %s |\n", label, t, r, rc, yesNo(met))
		}
	}
	ratio("pass one / read floor (≤ 1.2)", "pass one", "read floor", 1.2, true)
	ratio("pass two / write floor (≤ 1.1)", "pass two", "write floor", 1.1, true)
	ratio("full run / DuckDB peer (≤ 0.8)", "full run", "peer", 0.8, true)
	if len(threads) >= 2 {
		t1, t2 := threads[0], threads[len(threads)-1]
		x, ok1 := med("full run", t1)
		y, ok2 := med("full run", t2)
		if ok1 && ok2 {
			fmt.Fprintf(&out, "| full run speed-up, %d → %d workers (≥ 1.7) | %d/%d | %.2f | CPU s %.1f / %.1f | %s |\n",
				t1, t2, t1, t2, x.wall/y.wall, x.cpu, y.cpu, yesNo(x.wall/y.wall >= 1.7))
		}
		// The peer's own speed-up shows how busy the machine's second CPU
		// was: on a shared machine both programs lose alike.
		if x, ok := med("peer", t1); ok {
			if y, ok := med("peer", t2); ok {
				fmt.Fprintf(&out, "| (context) DuckDB peer speed-up, %d → %d threads | %d/%d | %.2f | CPU s %.1f / %.1f | |\n",
					t1, t2, t1, t2, x.wall/y.wall, x.cpu, y.cpu)
			}
		}
		// On a shared machine the fastest repetition is the one the other
		// tenants disturbed least (common practice for noisy hosts); its
		// speed-up is context, the goal is judged on medians above.
		fastest := func(name string, t int) (float64, bool) {
			ss := samples[fmt.Sprintf("%s/%d", name, t)]
			if len(ss) == 0 {
				return 0, false
			}
			m := ss[0].wall
			for _, s := range ss[1:] {
				m = min(m, s.wall)
			}
			return m, true
		}
		for _, name := range []string{"full run", "peer"} {
			x, ok1 := fastest(name, t1)
			y, ok2 := fastest(name, t2)
			if ok1 && ok2 {
				fmt.Fprintf(&out, "| (context) %s speed-up of the fastest repetitions, %d → %d | %d/%d | %.2f | wall s %.2f / %.2f | |\n",
					name, t1, t2, t1, t2, x/y, x, y)
			}
		}
		var peak float64
		for _, j := range jobs {
			if strings.HasPrefix(j.name, "pass") || j.name == "full run" {
				if s, ok := med(j.name, t2); ok {
					peak = max(peak, s.rssMiB)
				}
			}
		}
		fmt.Fprintf(&out, "| lakescale peak RSS at %d workers, MiB (≤ 1024) | %d | %.0f | | %s |\n", t2, t2, peak, yesNo(peak <= 1024))
	}

	fmt.Fprintf(&out, "\nchecks:\n")
	if len(hashes) > 0 {
		fmt.Fprintf(&out, "- full-run outputs byte-identical across repetitions and worker counts %v: %s (%d files)\n", threads, yesNo(deterministic), len(firstHashes))
	}
	for _, t := range threads {
		lsStats, peerStats := w("stats", t)+".json", w("peer-stats", t)+".json"
		if exists(lsStats) && exists(peerStats) {
			fmt.Fprintf(&out, "- statistics, lakescale vs DuckDB at %d threads: %s\n", t, compareStats(lsStats, peerStats))
		}
	}
	if t := threads[0]; exists(filepath.Join(w("run", t), "_manifest.json")) {
		runDir := w("run", t)
		def := filepath.Join(work, "default-writer")
		must(os.RemoveAll(def))
		must(runQuiet(b("floors"), "copy", "-default-writer", "-input", runDir, "-output", def, "-workers", strconv.Itoa(runtime.NumCPU())))
		ls, dw := treeBytes(runDir), treeBytes(def)
		fmt.Fprintf(&out, "- output size: lakescale %.1f MB, the same data through Arrow's default writer (zstd) %.1f MB: ratio %.3f (at most 10%% larger: %s); input lake %.1f MB",
			float64(ls)/1e6, float64(dw)/1e6, float64(ls)/float64(dw), yesNo(float64(ls) <= 1.10*float64(dw)), float64(lakeBytes)/1e6)
		if p := w("peer", t); exists(p) {
			fmt.Fprintf(&out, "; DuckDB's output %.1f MB", float64(treeBytes(p))/1e6)
		}
		fmt.Fprintln(&out)
		fmt.Fprintf(&out, "- independent reader (xitongsys/parquet-go): %s\n", independentCheck(runDir))
		must(os.RemoveAll(def))
	}
	fmt.Fprintf(&out, "\nload average at end: %s\n", loadAvg())
	fmt.Print("\n" + out.String())
	results := filepath.Join(*cache, fmt.Sprintf("results-%d.md", *rows))
	must(os.WriteFile(results, out.Bytes(), 0o644))
	fmt.Printf("(also in %s)\n", results)
}

func timeCmd(argv []string) (sample, error) {
	cmd := exec.Command(argv[0], argv[1:]...)
	var stderr bytes.Buffer
	cmd.Stdout = io.Discard
	cmd.Stderr = &stderr
	start := time.Now()
	err := cmd.Run()
	wall := time.Since(start).Seconds()
	if err != nil {
		return sample{}, fmt.Errorf("%v: %s", err, strings.TrimSpace(stderr.String()))
	}
	ps := cmd.ProcessState
	s := sample{wall: wall, cpu: (ps.UserTime() + ps.SystemTime()).Seconds()}
	if ru, ok := ps.SysUsage().(*syscall.Rusage); ok {
		s.rssMiB = float64(ru.Maxrss) / 1024 // KiB on Linux
	}
	return s, nil
}

func runQuiet(name string, args ...string) error {
	cmd := exec.Command(name, args...)
	cmd.Stdout = os.Stderr
	cmd.Stderr = os.Stderr
	return cmd.Run()
}

func median(xs []float64) float64 {
	s := slices.Clone(xs)
	slices.Sort(s)
	n := len(s)
	if n%2 == 1 {
		return s[n/2]
	}
	return (s[n/2-1] + s[n/2]) / 2
}

// outputHashes lists "path sha256" of a dataset manifest's outputs.
func outputHashes(path string) []string {
	f, err := os.Open(path)
	must(err)
	defer f.Close()
	m, err := manifests.Decode(f)
	must(err)
	var hs []string
	for _, o := range m.Outputs {
		hs = append(hs, o.Path+" "+o.SHA256)
	}
	return hs
}

func treeBytes(root string) int64 {
	var n int64
	_ = filepath.Walk(root, func(p string, fi os.FileInfo, err error) error {
		if err == nil && fi.Mode().IsRegular() && strings.HasSuffix(p, ".parquet") {
			n += fi.Size()
		}
		return nil
	})
	return n
}

func exists(p string) bool { _, err := os.Stat(p); return err == nil }

func yesNo(b bool) string {
	if b {
		return "yes"
	}
	return "**no**"
}

func cpuModel() string {
	b, _ := os.ReadFile("/proc/cpuinfo")
	for _, l := range strings.Split(string(b), "\n") {
		if strings.HasPrefix(l, "model name") {
			return strings.TrimSpace(strings.SplitN(l, ":", 2)[1])
		}
	}
	return runtime.GOARCH
}

func memTotal() string {
	b, _ := os.ReadFile("/proc/meminfo")
	for _, l := range strings.Split(string(b), "\n") {
		if f := strings.Fields(l); len(f) >= 2 && f[0] == "MemTotal:" {
			kb, _ := strconv.ParseFloat(f[1], 64)
			return fmt.Sprintf("%.0f GiB RAM", kb/1024/1024)
		}
	}
	return "? RAM"
}

func loadAvg() string {
	b, _ := os.ReadFile("/proc/loadavg")
	f := strings.Fields(string(b))
	if len(f) < 3 {
		return "?"
	}
	return strings.Join(f[:3], " ")
}

func envInt(name string, def int64) int64 {
	if v, err := strconv.ParseInt(os.Getenv(name), 10, 64); err == nil && v > 0 {
		return v
	}
	return def
}

func envStr(name, def string) string {
	if v := os.Getenv(name); v != "" {
		return v
	}
	return def
}

func must(err error) {
	if err != nil {
		fatalf("%v", err)
	}
}

func fatalf(format string, args ...any) {
	fmt.Fprintf(os.Stderr, "bench: "+format+"\n", args...)
	os.Exit(1)
}
