package jobs

import (
	"context"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"path/filepath"

	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/array"
	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/pqarrow"

	"github.com/lakescale/lakescale/arrowio"
)

// The demo is an invented wind-turbine fleet: every number below is made
// up for the demo and describes no real site or machine.
var (
	demoSites = []string{"north-ridge", "salt-flats", "cape-east"}
	demoDays  = []string{"2026-03-01", "2026-03-02", "2026-03-03"}
)

const demoRowsPerFile = 1500

const demoJob = `# lakescale demo job: an invented wind-turbine fleet's telemetry.
# Relative paths are relative to this file.
input = "lake"
output = "scaled"
std = "population"
compression = "zstd"

# Power to [0, 1] for a sigmoid output layer.
[[rule]]
columns = ["power_kw"]
method = "minmax"

# Pitch is signed around zero: keep the sign, scale into [-1, 1].
[[rule]]
columns = ["blade_pitch_deg"]
method = "maxabs"

[[rule]]
columns = ["nacelle_temp_c"]
method = "meannorm"

# Everything else numeric except the timestamp: z-score.
[[rule]]
columns = ["*"]
exclude = ["ts_unix"]
method = "zscore"
`

func demoSchema() *arrow.Schema {
	return arrow.NewSchema([]arrow.Field{
		{Name: "turbine_id", Type: arrow.BinaryTypes.String},
		{Name: "ts_unix", Type: arrow.PrimitiveTypes.Int64},
		{Name: "wind_speed_ms", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "rotor_rpm", Type: arrow.PrimitiveTypes.Float64},
		{Name: "power_kw", Type: arrow.PrimitiveTypes.Float64, Nullable: true},
		{Name: "blade_pitch_deg", Type: arrow.PrimitiveTypes.Float64},
		{Name: "nacelle_temp_c", Type: arrow.PrimitiveTypes.Float32},
		{Name: "vibration_mm_s", Type: arrow.PrimitiveTypes.Float64},
		{Name: "fault_count", Type: arrow.PrimitiveTypes.Int32},
		{Name: "energy_wh", Type: arrow.PrimitiveTypes.Int64},
	}, nil)
}

// demoRecord builds one (site, day) partition's rows, deterministically.
func demoRecord(site, day int) arrow.Record {
	rng := rand.New(rand.NewPCG(uint64(site+1), uint64(day+1)))
	b := array.NewRecordBuilder(memory.DefaultAllocator, demoSchema())
	defer b.Release()
	ids := b.Field(0).(*array.StringBuilder)
	ts := b.Field(1).(*array.Int64Builder)
	wind := b.Field(2).(*array.Float64Builder)
	rpm := b.Field(3).(*array.Float64Builder)
	power := b.Field(4).(*array.Float64Builder)
	pitch := b.Field(5).(*array.Float64Builder)
	temp := b.Field(6).(*array.Float32Builder)
	vib := b.Field(7).(*array.Float64Builder)
	faults := b.Field(8).(*array.Int32Builder)
	energy := b.Field(9).(*array.Int64Builder)
	start := int64(1772323200) + int64(day)*86400 // 2026-03-01T00:00:00Z
	meanWind := 6.5 + 2.5*float64(site)
	for t := range 12 {
		counter := int64(t+1) * 1_000_000_000 // invented lifetime energy, Wh
		for i := range demoRowsPerFile / 12 {
			ids.Append(fmt.Sprintf("%s-%02d", demoSites[site][:2], t+1))
			ts.Append(start + int64(i)*60*int64(12))
			w := math.Max(0, meanWind+2.8*rng.NormFloat64())
			if rng.IntN(50) == 0 {
				wind.AppendNull() // anemometer dropout
			} else {
				wind.Append(math.Round(w*100) / 100)
			}
			rpm.Append(math.Min(16, 1.1*w))
			p := 3000 / (1 + math.Exp(-(w-9)/1.6))
			if w < 3 || w > 25 {
				p = 0
			}
			if rng.IntN(80) == 0 {
				power.AppendNull()
			} else {
				power.Append(math.Round(p*10) / 10)
			}
			pitch.Append(math.Round((math.Max(0, w-11)*2.2-1.5+rng.NormFloat64())*100) / 100)
			temp.Append(float32(18 + 4*float64(site) + 9*rng.Float64() + 0.2*w))
			vib.Append(math.Abs(0.8 + 0.05*w + 0.3*rng.NormFloat64()))
			faults.Append(int32(rng.IntN(100) / 97))
			counter += int64(p * 1000 / 5)
			energy.Append(counter)
		}
	}
	return b.NewRecord()
}

// Demo writes the invented demo lake and job file under dir, runs the job
// and prints where the output and the manifest are.
func Demo(ctx context.Context, dir string, base Config) error {
	lake := filepath.Join(dir, "lake")
	for s, site := range demoSites {
		for d, day := range demoDays {
			rec := demoRecord(s, d)
			path := filepath.Join(lake, "site="+site, "day="+day, "part-0.parquet")
			_, err := arrowio.WriteParquetAtomic(ctx, path, rec.Schema(), arrowio.WriteOptions{Compression: arrowio.Zstd},
				func(w *pqarrow.FileWriter) error { return w.Write(rec) })
			rec.Release()
			if err != nil {
				return err
			}
		}
	}
	jobPath := filepath.Join(dir, "job.toml")
	if err := arrowio.WriteFileAtomic(jobPath, func(w io.Writer) error {
		_, err := io.WriteString(w, demoJob)
		return err
	}); err != nil {
		return err
	}
	o := Overrides{Overwrite: true}
	if base.Workers > 0 {
		o.Workers = &base.Workers
	}
	cfg, err := Load(jobPath, o)
	if err != nil {
		return err
	}
	cfg.Version, cfg.Out = base.Version, base.Out
	if base.Now != nil {
		cfg.Now = base.Now
	}
	fmt.Fprintf(cfg.Out, "demo lake: %s (%d files)\njob file: %s\n", lake, len(demoSites)*len(demoDays), jobPath)
	if err := Run(ctx, cfg); err != nil {
		return err
	}
	fmt.Fprintln(cfg.Out)
	return Show(cfg.Out, filepath.Join(cfg.Output, ManifestName))
}
