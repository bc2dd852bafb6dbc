package main

import (
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"

	pqgo "github.com/xitongsys/parquet-go/reader"
	pqsource "github.com/xitongsys/parquet-go/source"

	"github.com/lakescale/lakescale/manifests"
)

// statsTolerance bounds the relative difference allowed between
// lakescale's exact mean and std and DuckDB's floating-point ones.
const statsTolerance = 1e-9

type peerColumn struct {
	Name          string  `json:"name"`
	Count         uint64  `json:"count"`
	Nulls         uint64  `json:"nulls"`
	Mean          float64 `json:"mean"`
	StdPopulation float64 `json:"std_population"`
	Min           float64 `json:"min"`
	Max           float64 `json:"max"`
}

// compareStats checks lakescale's statistics file against the peer's:
// counts, nulls, min and max must be equal, mean and population std agree
// to statsTolerance relative.
func compareStats(lsPath, peerPath string) string {
	f, err := os.Open(lsPath)
	must(err)
	m, err := manifests.Decode(f)
	f.Close()
	must(err)
	raw, err := os.ReadFile(peerPath)
	must(err)
	var peer struct {
		Columns []peerColumn `json:"columns"`
	}
	must(json.Unmarshal(raw, &peer))
	byName := map[string]peerColumn{}
	for _, c := range peer.Columns {
		byName[c.Name] = c
	}
	var bad []string
	var worstMean, worstStd float64
	var worstMeanCol, worstStdCol string
	for _, c := range m.Columns {
		p, ok := byName[c.Name]
		if !ok {
			bad = append(bad, c.Name+" missing from the peer")
			continue
		}
		s := c.Stats
		if s.Count != p.Count || s.Nulls != p.Nulls {
			bad = append(bad, fmt.Sprintf("%s count/nulls %d/%d vs %d/%d", c.Name, s.Count, s.Nulls, p.Count, p.Nulls))
		}
		if float64(s.Min) != p.Min || float64(s.Max) != p.Max {
			bad = append(bad, fmt.Sprintf("%s min/max %v/%v vs %v/%v", c.Name, s.Min, s.Max, p.Min, p.Max))
		}
		if d := relDiff(float64(s.Mean), p.Mean); d > worstMean {
			worstMean, worstMeanCol = d, c.Name
		}
		if d := relDiff(float64(s.StdPopulation), p.StdPopulation); d > worstStd {
			worstStd, worstStdCol = d, c.Name
		}
	}
	if worstMean > statsTolerance {
		bad = append(bad, fmt.Sprintf("mean of %s differs by %.1e relative", worstMeanCol, worstMean))
	}
	if worstStd > statsTolerance {
		bad = append(bad, fmt.Sprintf("std of %s differs by %.1e relative", worstStdCol, worstStd))
	}
	summary := fmt.Sprintf("%d columns; counts, nulls, min, max equal; largest relative difference of mean %.1e (%s), of population std %.1e (%s); tolerance %.0e",
		len(m.Columns), worstMean, orDash(worstMeanCol), worstStd, orDash(worstStdCol), statsTolerance)
	if len(bad) > 0 {
		return "**MISMATCH**: " + strings.Join(bad, "; ")
	}
	return "agree: " + summary
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func relDiff(a, b float64) float64 {
	if a == b {
		return 0
	}
	return math.Abs(a-b) / math.Max(math.Abs(a), math.Abs(b))
}

// localFile is the file source github.com/xitongsys/parquet-go reads
// from; Open("") re-opens the same file, as that reader does per column.
type localFile struct {
	*os.File
	path string
}

func (f *localFile) Open(name string) (pqsource.ParquetFile, error) {
	if name == "" {
		name = f.path
	}
	o, err := os.Open(name)
	if err != nil {
		return nil, err
	}
	return &localFile{File: o, path: name}, nil
}

func (f *localFile) Create(string) (pqsource.ParquetFile, error) { return nil, os.ErrPermission }

// independentCheck reads every column of the first output file with
// github.com/xitongsys/parquet-go, which shares no code with Arrow.
func independentCheck(dir string) string {
	var first string
	_ = filepath.Walk(dir, func(p string, fi os.FileInfo, err error) error {
		if err == nil && first == "" && fi.Mode().IsRegular() && strings.HasSuffix(p, ".parquet") {
			first = p
		}
		return nil
	})
	if first == "" {
		return "**no output file**"
	}
	f, err := os.Open(first)
	must(err)
	src := &localFile{File: f, path: first}
	defer src.Close()
	pr, err := pqgo.NewParquetColumnReader(src, 1)
	if err != nil {
		return "**failed**: " + err.Error()
	}
	defer pr.ReadStop()
	rows := pr.GetNumRows()
	hasParams := false
	for _, kv := range pr.Footer.GetKeyValueMetadata() {
		hasParams = hasParams || kv.Key == manifests.MetadataKey
	}
	for i := range pr.SchemaHandler.ValueColumns {
		vals, _, _, err := pr.ReadColumnByIndex(int64(i), rows)
		if err != nil {
			return fmt.Sprintf("**failed** on column %d: %v", i, err)
		}
		if int64(len(vals)) != rows {
			return fmt.Sprintf("**failed**: column %d has %d values, want %d", i, len(vals), rows)
		}
	}
	rel, _ := filepath.Rel(dir, first)
	return fmt.Sprintf("read %s: %d rows × %d columns, %s metadata present: %s", rel, rows, len(pr.SchemaHandler.ValueColumns), manifests.MetadataKey, yesNo(hasParams))
}
