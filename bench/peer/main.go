// Command peer does lakescale's two passes with DuckDB, a general-purpose
// SQL engine, as the benchmark's reference: a statistics query over the
// Hive-partitioned lake, then a COPY of the z-scored columns plus the
// pass-through columns to Hive-partitioned zstd Parquet. It lives in its
// own module so that lakescale never depends on cgo or DuckDB.
//
//	peer -input LAKE -output DIR -columns a,b,c -threads N -stats FILE [-stats-only]
//
// The statistics file is JSON: rows, then per column count, nulls, mean,
// population std, min and max as DuckDB computes them (in floating point:
// not exact, and not necessarily the same at 1 and 2 threads).
package main

import (
	"database/sql"
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	_ "github.com/duckdb/duckdb-go/v2"
)

type column struct {
	Name          string  `json:"name"`
	Count         int64   `json:"count"`
	Nulls         int64   `json:"nulls"`
	Mean          float64 `json:"mean"`
	StdPopulation float64 `json:"std_population"`
	Min           float64 `json:"min"`
	Max           float64 `json:"max"`
}

type statsFile struct {
	Rows    int64    `json:"rows"`
	Columns []column `json:"columns"`
}

func main() {
	input := flag.String("input", "", "input lake")
	output := flag.String("output", "", "output directory")
	columns := flag.String("columns", "", "comma-separated columns to z-score")
	threads := flag.Int("threads", 1, "DuckDB threads")
	statsPath := flag.String("stats", "", "write the statistics here (JSON)")
	statsOnly := flag.Bool("stats-only", false, "run the statistics query only")
	flag.Parse()
	if err := run(*input, *output, strings.Split(*columns, ","), *threads, *statsPath, *statsOnly); err != nil {
		fmt.Fprintln(os.Stderr, "peer:", err)
		os.Exit(1)
	}
}

// quote makes s an SQL string literal.
func quote(s string) string { return "'" + strings.ReplaceAll(s, "'", "''") + "'" }

// ident makes s an SQL identifier.
func ident(s string) string { return `"` + strings.ReplaceAll(s, `"`, `""`) + `"` }

// double is an SQL DOUBLE literal (exponent form, so it is not DECIMAL).
func double(v float64) string { return strconv.FormatFloat(v, 'e', -1, 64) }

func run(input, output string, cols []string, threads int, statsPath string, statsOnly bool) error {
	db, err := sql.Open("duckdb", "")
	if err != nil {
		return err
	}
	defer db.Close()
	db.SetMaxOpenConns(1) // one connection, so SET applies to every query
	if _, err := db.Exec(fmt.Sprintf("SET threads = %d", threads)); err != nil {
		return err
	}
	src := fmt.Sprintf("read_parquet(%s, hive_partitioning = true)", quote(filepath.Join(input, "**", "*.parquet")))

	t0 := time.Now()
	var sel []string
	sel = append(sel, "count(*)")
	for _, c := range cols {
		q := ident(c)
		sel = append(sel, fmt.Sprintf("count(%s), avg(%s), stddev_pop(%s), CAST(min(%s) AS DOUBLE), CAST(max(%s) AS DOUBLE)", q, q, q, q, q))
	}
	row := db.QueryRow("SELECT " + strings.Join(sel, ", ") + " FROM " + src)
	st := statsFile{Columns: make([]column, len(cols))}
	dest := []any{&st.Rows}
	for j := range cols {
		c := &st.Columns[j]
		c.Name = cols[j]
		dest = append(dest, &c.Count, &c.Mean, &c.StdPopulation, &c.Min, &c.Max)
	}
	if err := row.Scan(dest...); err != nil {
		return fmt.Errorf("statistics query: %w", err)
	}
	for j := range st.Columns {
		st.Columns[j].Nulls = st.Rows - st.Columns[j].Count
	}
	t1 := time.Now()
	if statsPath != "" {
		b, err := json.MarshalIndent(st, "", "  ")
		if err != nil {
			return err
		}
		if err := os.WriteFile(statsPath, append(b, '\n'), 0o644); err != nil {
			return err
		}
	}
	if statsOnly {
		fmt.Printf("peer: stats %.2fs\n", t1.Sub(t0).Seconds())
		return nil
	}

	// Every column of the files, in order, z-scored where selected; the
	// Hive keys become the output's partition folders.
	var names []string
	rows, err := db.Query(fmt.Sprintf("SELECT column_name FROM (DESCRIBE SELECT * FROM %s)", src))
	if err != nil {
		return err
	}
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			rows.Close()
			return err
		}
		names = append(names, n)
	}
	rows.Close()
	scaled := map[string]column{}
	for _, c := range st.Columns {
		scaled[c.Name] = c
	}
	var out, keys []string
	for _, k := range []string{"site", "day"} {
		for _, n := range names {
			if n == k {
				keys = append(keys, ident(n))
			}
		}
	}
	for _, n := range names {
		c, ok := scaled[n]
		switch {
		case ok:
			s := c.StdPopulation
			if s == 0 || math.IsNaN(s) {
				s = 1
			}
			out = append(out, fmt.Sprintf("(%s - %s) / %s AS %s", ident(n), double(c.Mean), double(s), ident(n)))
		default:
			out = append(out, ident(n))
		}
	}
	copySQL := fmt.Sprintf("COPY (SELECT %s FROM %s) TO %s (FORMAT parquet, COMPRESSION zstd, PARTITION_BY (%s))",
		strings.Join(out, ", "), src, quote(output), strings.Join(keys, ", "))
	if _, err := db.Exec(copySQL); err != nil {
		return fmt.Errorf("copy: %w", err)
	}
	t2 := time.Now()
	fmt.Printf("peer: stats %.2fs, copy %.2fs\n", t1.Sub(t0).Seconds(), t2.Sub(t1).Seconds())
	return nil
}
