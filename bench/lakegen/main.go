// Command lakegen writes the synthetic benchmark lake: an invented
// wind-turbine fleet's telemetry as Hive-partitioned, zstd-compressed
// Parquet. Every number below is made up for the benchmark and describes
// no real site or machine. The output depends only on the flags: each
// file's rows come from a generator seeded by its position, so the same
// flags give the same values (and, with the same library versions, the
// same bytes).
//
// The files are written the way a typical producer writes them: Arrow's
// Parquet writer with its default properties (dictionary encoding on for
// every column, 1 MiB data pages) and zstd, not lakescale's own writer.
//
//	go run ./bench/lakegen -dir .bench-cache/lake-20000000 -rows 20000000
//
// A complete lake holds a _complete marker (ignored by lakescale, which
// skips names starting with "_"); lakegen does nothing when it exists.
package main

import (
	"errors"
	"flag"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"sync"
	"time"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	// For its zstd codec that reuses encoders: the same frames, written
	// faster, so the one-off generation takes less time.
	_ "github.com/lakescale/lakescale/arrowio"
)

// Sites and days of the invented fleet: 4 × 16 = 64 partitions by default.
var sites = []string{"north-ridge", "salt-flats", "cape-east", "high-moor"}

const turbinesPerSite = 24

// Schema: two pass-through columns (a string and the int64 timestamp, which
// the benchmark excludes from scaling) and twelve scaled numeric columns:
// nine float64 (five quantised sensor channels, four full precision), one
// float32, one int32 and one int64 counter.
func schema() *arrow.Schema {
	return arrow.NewSchema([]arrow.Field{
		{Name: "turbine_id", Type: arrow.BinaryTypes.String},
		{Name: "ts_unix", Type: arrow.PrimitiveTypes.Int64},
		{Name: "wind_speed_ms", Type: arrow.PrimitiveTypes.Float64, Nullable: true},  // 0.01 m/s
		{Name: "wind_dir_deg", Type: arrow.PrimitiveTypes.Float64},                   // 0.1 degree
		{Name: "rotor_rpm", Type: arrow.PrimitiveTypes.Float64},                      // full precision
		{Name: "power_kw", Type: arrow.PrimitiveTypes.Float64, Nullable: true},       // 0.1 kW
		{Name: "blade_pitch_deg", Type: arrow.PrimitiveTypes.Float64},                // 0.01 degree
		{Name: "gen_temp_c", Type: arrow.PrimitiveTypes.Float64},                     // 0.1 °C
		{Name: "grid_freq_hz", Type: arrow.PrimitiveTypes.Float64},                   // 0.001 Hz
		{Name: "vibration_mm_s", Type: arrow.PrimitiveTypes.Float64, Nullable: true}, // full precision
		{Name: "yaw_error_deg", Type: arrow.PrimitiveTypes.Float64},                  // full precision
		{Name: "nacelle_temp_c", Type: arrow.PrimitiveTypes.Float32},                 // full precision
		{Name: "fault_count", Type: arrow.PrimitiveTypes.Int32},
		{Name: "energy_wh", Type: arrow.PrimitiveTypes.Int64},
	}, nil)
}

// ScaledColumns are the columns the benchmark scales (all numeric columns
// but ts_unix); bench/run passes them to the floors and the peer.
var scaledColumns = []string{
	"wind_speed_ms", "wind_dir_deg", "rotor_rpm", "power_kw", "blade_pitch_deg", "gen_temp_c",
	"grid_freq_hz", "vibration_mm_s", "yaw_error_deg", "nacelle_temp_c", "fault_count", "energy_wh",
}

func main() {
	dir := flag.String("dir", "", "output directory (required)")
	rows := flag.Int64("rows", envInt("BENCH_ROWS", 20_000_000), "total rows (env BENCH_ROWS)")
	files := flag.Int("files", 64, "number of files; a multiple of 4 (sites) gives full days")
	rgRows := flag.Int64("rowgroup", 1<<20, "row-group cap in rows")
	workers := flag.Int("workers", 2, "files written at once")
	columns := flag.Bool("columns", false, "print the scaled columns, comma-separated, and exit")
	flag.Parse()
	if *columns {
		for i, c := range scaledColumns {
			if i > 0 {
				fmt.Print(",")
			}
			fmt.Print(c)
		}
		fmt.Println()
		return
	}
	if *dir == "" || *rows < int64(*files) || *files < 1 {
		fmt.Fprintln(os.Stderr, "lakegen: need -dir, -files >= 1 and -rows >= -files")
		os.Exit(2)
	}
	if err := generate(*dir, *rows, *files, *rgRows, *workers); err != nil {
		fmt.Fprintln(os.Stderr, "lakegen:", err)
		os.Exit(1)
	}
}

func envInt(name string, def int64) int64 {
	if v, err := strconv.ParseInt(os.Getenv(name), 10, 64); err == nil && v > 0 {
		return v
	}
	return def
}

func generate(dir string, rows int64, files int, rgRows int64, workers int) error {
	marker := filepath.Join(dir, "_complete")
	if _, err := os.Stat(marker); err == nil {
		fmt.Printf("lakegen: %s is complete\n", dir)
		return nil
	}
	// A partial lake from an interrupted run is rebuilt from scratch, in a
	// temporary sibling that is renamed into place when complete.
	tmp := dir + ".tmp"
	if err := os.RemoveAll(tmp); err != nil {
		return err
	}
	if err := os.RemoveAll(dir); err != nil {
		return err
	}
	start := time.Now()
	var (
		wg   sync.WaitGroup
		mu   sync.Mutex
		errs []error
		next = make(chan int)
	)
	for range max(1, workers) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				site, day := i%len(sites), i/len(sites)
				n := rows / int64(files)
				if int64(i) < rows%int64(files) {
					n++
				}
				rel := filepath.Join("site="+sites[site], fmt.Sprintf("day=2026-04-%02d", day+1), "part-0.parquet")
				if err := writeFile(filepath.Join(tmp, rel), i, site, day, n, rgRows); err != nil {
					mu.Lock()
					errs = append(errs, fmt.Errorf("%s: %w", rel, err))
					mu.Unlock()
				}
			}
		}()
	}
	for i := range files {
		next <- i
	}
	close(next)
	wg.Wait()
	if err := errors.Join(errs...); err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(tmp, "_complete"), []byte(strconv.FormatInt(rows, 10)+" rows\n"), 0o644); err != nil {
		return err
	}
	if err := os.Rename(tmp, dir); err != nil {
		return err
	}
	fmt.Printf("lakegen: wrote %d rows in %d files to %s in %.1fs\n", rows, files, dir, time.Since(start).Seconds())
	return nil
}

// writeFile writes one partition's rows: turbines report in turn, one
// timestamp every 10 s per turbine, with slowly varying per-turbine wind.
func writeFile(path string, seq, site, day int, rows, rgRows int64) error {
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return err
	}
	rec := record(seq, site, day, rows)
	defer rec.Release()
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	props := parquet.NewWriterProperties(
		parquet.WithCompression(compress.Codecs.Zstd),
		parquet.WithMaxRowGroupLength(rgRows),
		parquet.WithCreatedBy("lakegen"),
	)
	w, err := pqarrow.NewFileWriter(rec.Schema(), f, props, pqarrow.NewArrowWriterProperties(pqarrow.WithStoreSchema()))
	if err != nil {
		f.Close()
		return err
	}
	if err := w.Write(rec); err != nil {
		_ = w.Close() // the write error is the one to report
		return err
	}
	return w.Close() // closes f
}

func record(seq, site, day int, rows int64) arrow.Record {
	rng := rand.New(rand.NewPCG(uint64(seq)+1, 0x1a4e5ca1e))
	b := array.NewRecordBuilder(memory.DefaultAllocator, schema())
	defer b.Release()
	b.Reserve(int(rows))
	ids := b.Field(0).(*array.StringBuilder)
	ts := b.Field(1).(*array.Int64Builder)
	wind := b.Field(2).(*array.Float64Builder)
	wdir := b.Field(3).(*array.Float64Builder)
	rpm := b.Field(4).(*array.Float64Builder)
	power := b.Field(5).(*array.Float64Builder)
	pitch := b.Field(6).(*array.Float64Builder)
	gtemp := b.Field(7).(*array.Float64Builder)
	freq := b.Field(8).(*array.Float64Builder)
	vib := b.Field(9).(*array.Float64Builder)
	yaw := b.Field(10).(*array.Float64Builder)
	ntemp := b.Field(11).(*array.Float32Builder)
	faults := b.Field(12).(*array.Int32Builder)
	energy := b.Field(13).(*array.Int64Builder)

	names := make([]string, turbinesPerSite)
	w := make([]float64, turbinesPerSite)     // per-turbine wind, AR(1)
	counter := make([]int64, turbinesPerSite) // lifetime energy, Wh
	meanWind := 6 + 1.8*float64(site)
	for t := range names {
		names[t] = fmt.Sprintf("%s-%02d", sites[site][:2], t+1)
		w[t] = meanWind
		counter[t] = int64(site*turbinesPerSite+t+1) * 3_700_000_000
	}
	start := int64(1775001600) + int64(day)*86400 // 2026-04-01T00:00:00Z
	dirBase := 180 + 90*math.Sin(float64(day))
	for i := range rows {
		t := int(i % turbinesPerSite)
		ids.Append(names[t])
		ts.Append(start + (i/turbinesPerSite)*10)
		w[t] = meanWind + 0.97*(w[t]-meanWind) + 0.6*rng.NormFloat64()
		v := math.Max(0, w[t])
		if rng.IntN(50) == 0 {
			wind.AppendNull() // anemometer dropout
		} else {
			wind.Append(math.Round(v*100) / 100)
		}
		wdir.Append(math.Round(math.Mod(dirBase+25*rng.NormFloat64()+360, 360)*10) / 10)
		rpm.Append(math.Min(15.8, 1.12*v) + 0.05*rng.NormFloat64())
		p := 3200 / (1 + math.Exp(-(v-9.5)/1.5))
		if v < 3 || v > 25 {
			p = 0
		}
		if rng.IntN(90) == 0 {
			power.AppendNull()
		} else {
			power.Append(math.Round(p*10) / 10)
		}
		pitch.Append(math.Round((math.Max(0, v-11.5)*2.1-1.2+0.4*rng.NormFloat64())*100) / 100)
		gtemp.Append(math.Round((45+0.008*p+3*rng.NormFloat64())*10) / 10)
		freq.Append(math.Round((50+0.02*rng.NormFloat64())*1000) / 1000)
		if rng.IntN(200) == 0 {
			vib.AppendNull()
		} else {
			vib.Append(math.Abs(0.9 + 0.06*v + 0.35*rng.NormFloat64()))
		}
		yaw.Append(4 * rng.NormFloat64())
		ntemp.Append(float32(16 + 3*float64(site) + 8*rng.Float64() + 0.15*v))
		faults.Append(int32(rng.IntN(1000) / 990))
		counter[t] += int64(p * 10 / 3.6) // Wh in 10 s
		energy.Append(counter[t])
	}
	return b.NewRecord()
}
