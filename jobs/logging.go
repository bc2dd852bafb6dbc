package jobs

import (
	"fmt"
	"io"
	"log/slog"
	"strconv"
	"strings"
	"time"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
)

// runLog is one command's structured log (--log-format: a line per phase
// and a final summary line, through log/slog) and its metrics file
// (--metrics). Its methods are called from the command's goroutine only,
// except warn, which only writes a line and may be called from any.
type runLog struct {
	cfg     *Config
	command string
	l       *slog.Logger // nil: no log lines
	start   time.Time
	mark    time.Time // start of the current phase
	sum     runSummary
}

// runSummary is what the summary line and the metrics report.
type runSummary struct {
	FilesMeasured  int // read and measured in pass one
	FilesCached    int // taken from the statistics cache
	FilesDescribed int // left out by the fit filter: hashed only
	CacheMissing   int
	CacheStale     int
	CacheCorrupt   int
	CachePruned    int
	FilesWritten   int
	Rows           int64 // rows of every input
	Bytes          int64 // bytes of every input
	BytesWritten   int64
	Warnings       int // column warnings in the manifest
}

// newRunLog checks the log format and starts the clock.
func newRunLog(cfg *Config, command string) (*runLog, error) {
	l := &runLog{cfg: cfg, command: command, start: cfg.Now()}
	l.mark = l.start
	w := cfg.Log
	if w == nil {
		w = io.Discard
	}
	switch cfg.LogFormat {
	case "":
	case "text":
		l.l = slog.New(slog.NewTextHandler(w, nil))
	case "json":
		l.l = slog.New(slog.NewJSONHandler(w, nil))
	default:
		return nil, fmt.Errorf("%w: log format %q: want text or json", ErrUsage, cfg.LogFormat)
	}
	if l.l != nil {
		l.l = l.l.With("command", command)
	}
	return l, nil
}

// seconds since t on the job's clock, rounded to milliseconds.
func (l *runLog) since(t time.Time) float64 {
	return float64(l.cfg.Now().Sub(t).Milliseconds()) / 1000
}

// phase logs the end of a phase with its duration and attrs.
func (l *runLog) phase(name string, attrs ...any) {
	if l.l != nil {
		l.l.Info("phase", append([]any{"phase", name, "seconds", l.since(l.mark)}, attrs...)...)
	}
	l.mark = l.cfg.Now()
}

// warn logs a warning line (and nothing without a log format).
func (l *runLog) warn(msg string, attrs ...any) {
	if l.l != nil {
		l.l.Warn(msg, attrs...)
	}
}

// passOne records and logs where pass one's results came from.
func (l *runLog) passOne(results []fileResult) {
	s := &l.sum
	for _, r := range results {
		switch r.Origin.Source {
		case sourceMeasured:
			s.FilesMeasured++
		case sourceCached:
			s.FilesCached++
		case sourceDescribed:
			s.FilesDescribed++
		}
		switch r.Origin.Cache {
		case cacheMissing:
			s.CacheMissing++
		case cacheStale:
			s.CacheStale++
		case cacheCorrupt:
			s.CacheCorrupt++
		}
		s.Rows += r.Rows
		s.Bytes += r.Bytes
	}
	l.phase("pass_one", "files_measured", s.FilesMeasured, "files_cached", s.FilesCached, "files_not_fitted", s.FilesDescribed,
		"cache_missing", s.CacheMissing, "cache_stale", s.CacheStale, "cache_corrupt", s.CacheCorrupt,
		"rows", s.Rows, "bytes", s.Bytes)
	if s.CacheCorrupt > 0 {
		l.warn("corrupt cache entries were ignored and recomputed", "cache_corrupt", s.CacheCorrupt)
	}
}

// cacheSaved logs the cache update after the statistics were fitted.
func (l *runLog) cacheSaved(stored, pruned int) {
	l.sum.CachePruned = pruned
	l.phase("cache", "entries_written", stored, "entries_pruned", pruned)
}

// passTwo records and logs what pass two wrote.
func (l *runLog) passTwo(outs []written) {
	s := &l.sum
	for _, o := range outs {
		s.FilesWritten++
		s.BytesWritten += o.Out.Bytes
	}
	l.phase("pass_two", "files_written", s.FilesWritten, "bytes_written", s.BytesWritten)
}

// inputsOf counts the inputs' rows and bytes from pass two's results, for
// commands without a pass one (apply, invert).
func (l *runLog) inputsOf(outs []written) {
	for _, o := range outs {
		l.sum.Rows += o.In.Rows
		l.sum.Bytes += o.In.Bytes
	}
}

// done writes the summary line and, after a success, the metrics file.
// It returns err, or the metrics error when err is nil.
func (l *runLog) done(err error) error {
	s := l.sum
	if l.l != nil {
		attrs := []any{"status", "ok", "files_measured", s.FilesMeasured, "files_cached", s.FilesCached,
			"files_written", s.FilesWritten, "rows", s.Rows, "bytes", s.Bytes, "bytes_written", s.BytesWritten,
			"seconds", l.since(l.start), "warnings", s.Warnings}
		if err != nil {
			attrs[1] = "failed"
			attrs = append(attrs, "error", err.Error())
			l.l.Error("summary", attrs...)
		} else {
			l.l.Info("summary", attrs...)
		}
	}
	if err != nil || l.cfg.MetricsPath == "" {
		return err
	}
	return arrowio.WriteFileAtomic(l.cfg.MetricsPath, func(w io.Writer) error {
		_, err := io.WriteString(w, l.metrics())
		return err
	})
}

// metrics renders the Prometheus text exposition format (as documented
// by the Prometheus project, "Exposition formats"), for a textfile
// collector such as node exporter's. Every sample is a gauge labelled with
// the command and its output.
func (l *runLog) metrics() string {
	out := l.cfg.Output
	if out == "" {
		out = l.cfg.StatsPath
	}
	labels := fmt.Sprintf(`{command="%s",output="%s"}`, promLabel(l.command), promLabel(out))
	now := l.cfg.Now()
	s := l.sum
	var b strings.Builder
	for _, m := range []struct {
		name, help string
		value      float64
	}{
		{"lakescale_last_success_timestamp_seconds", "Time the last successful run finished, in seconds since 1970.", float64(now.UnixMilli()) / 1000},
		{"lakescale_last_run_duration_seconds", "Duration of the last successful run.", l.since(l.start)},
		{"lakescale_last_run_rows", "Rows of every input of the last successful run.", float64(s.Rows)},
		{"lakescale_last_run_bytes", "Bytes of every input of the last successful run.", float64(s.Bytes)},
		{"lakescale_last_run_files_measured", "Input files read and measured in pass one of the last successful run.", float64(s.FilesMeasured)},
		{"lakescale_last_run_files_cached", "Input files whose statistics came from the cache in the last successful run.", float64(s.FilesCached)},
		{"lakescale_last_run_warnings", "Column warnings in the manifest of the last successful run.", float64(s.Warnings)},
	} {
		fmt.Fprintf(&b, "# HELP %s %s\n# TYPE %s gauge\n%s%s %s\n", m.name, m.help, m.name, m.name, labels, strconv.FormatFloat(m.value, 'f', -1, 64))
	}
	return b.String()
}

// promLabel escapes a label value: backslash, double quote and line feed
// (Prometheus text exposition format).
func promLabel(s string) string {
	return strings.NewReplacer(`\`, `\\`, `"`, `\"`, "\n", `\n`).Replace(s)
}

// countWarnings adds up the columns' warnings.
func countWarnings(cols []manifests.Column) int {
	n := 0
	for _, c := range cols {
		n += len(c.Warnings)
	}
	return n
}
