package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"math/big"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/rogpeppe/go-internal/testscript"
)

// inverse is the map back to original units lakescale defines: the exact
// y*scale + center rounded once to the nearest float64, computed here with
// math/big. NaN and infinite y go through IEEE arithmetic.
func inverse(y, center, scale float64) float64 {
	if math.IsNaN(y) || math.IsInf(y, 0) {
		return y*scale + center
	}
	r := new(big.Rat).Mul(new(big.Rat).SetFloat64(y), new(big.Rat).SetFloat64(scale))
	x, _ := r.Add(r, new(big.Rat).SetFloat64(center)).Float64()
	return x
}

// cmdCheckInverted checks a dataset written by invert against the scaled
// dataset it was made from: the manifest (kind inverted) lists the scaled
// files as inputs and the written files as outputs; each mapped-back
// column holds y*scale + center rounded once (inverse), bit for bit
// (nulls null, NaN NaN) and, with ORIG, lies within 1e-12 (relative to
// max(|x|, |center|)) of the original value; every other column is
// identical to the scaled file's.
//
//	check-inverted SCALED BACK [ORIG]
func cmdCheckInverted(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "check-inverted")
	if len(args) != 2 && len(args) != 3 {
		ts.Fatalf("usage: check-inverted SCALED BACK [ORIG]")
	}
	scaled, back := ts.MkAbs(args[0]), ts.MkAbs(args[1])
	m, err := readTestManifest(filepath.Join(back, "_manifest.json"))
	ts.Check(err)
	var p problems
	if m.Kind != "inverted" {
		p.add("manifest kind %q, want inverted", m.Kind)
	}
	checkEntries(&p, "input", scaled, m.Inputs)
	checkEntries(&p, "output", back, m.Outputs)
	p.fatal(ts, "check-inverted "+args[1])
	type param struct{ center, scale float64 }
	params := map[string]param{}
	for _, c := range m.Columns {
		center, err1 := strconv.ParseFloat(string(c.Params.Center), 64)
		scale, err2 := strconv.ParseFloat(string(c.Params.Scale), 64)
		if err1 != nil || err2 != nil {
			ts.Fatalf("column %s: bad parameters", c.Name)
		}
		params[c.Name] = param{center, scale}
	}
	values := 0
	for _, o := range m.Outputs {
		src, err := readPQ(filepath.Join(scaled, filepath.FromSlash(o.Path)))
		ts.Check(err)
		dst, err := readPQ(filepath.Join(back, filepath.FromSlash(o.Path)))
		ts.Check(err)
		var orig *pqFile
		if len(args) == 3 {
			orig, err = readPQ(filepath.Join(ts.MkAbs(args[2]), filepath.FromSlash(o.Path)))
			ts.Check(err)
		}
		if src.Rows != dst.Rows || len(src.Columns) != len(dst.Columns) {
			p.add("%s: %d rows, %d columns; scaled file has %d rows, %d columns", o.Path, dst.Rows, len(dst.Columns), src.Rows, len(src.Columns))
			continue
		}
		for j, sc := range src.Columns {
			dc := dst.Columns[j]
			prm, mapped := params[sc.Name]
			if dc.Name != sc.Name {
				p.add("%s: column %d is %s, scaled file has %s", o.Path, j, dc.Name, sc.Name)
				continue
			}
			for k, y := range sc.Values {
				x := dc.Values[k]
				values++
				if !mapped {
					if !sameValue(x, y) {
						p.add("%s: %s row %d: %v, scaled file has %v", o.Path, dc.Name, k, x, y)
					}
					continue
				}
				if y == nil {
					if x != nil {
						p.add("%s: %s row %d: %v, want null", o.Path, dc.Name, k, x)
					}
					continue
				}
				fy, _ := asFloat64(y)
				want := inverse(fy, prm.center, prm.scale)
				got, ok := x.(float64)
				switch {
				case !ok:
					p.add("%s: %s row %d: %v (%T), want float64", o.Path, dc.Name, k, x, x)
				case math.IsNaN(want) && math.IsNaN(got):
				case math.Float64bits(got) != math.Float64bits(want):
					p.add("%s: %s row %d: %v, want RN(%v * %v + %v) = %v", o.Path, dc.Name, k, got, fy, prm.scale, prm.center, want)
				case orig != nil && !math.IsNaN(want) && !math.IsInf(want, 0):
					ox, _ := asFloat64(orig.column(dc.Name).Values[k])
					if d := math.Abs(got - ox); d > 1e-12*max(math.Abs(ox), math.Abs(prm.center)) {
						p.add("%s: %s row %d: mapped back to %v, original %v", o.Path, dc.Name, k, got, ox)
					}
				}
			}
		}
		if dst.Meta["lakescale.inverted"] == "" || dst.Meta["lakescale.params"] != "" {
			p.add("%s: footer keys %v, want lakescale.inverted and no lakescale.params", o.Path, keysOf(dst.Meta))
		}
	}
	p.fatal(ts, "check-inverted "+args[1])
	ts.Logf("check-inverted: %d files, %d values match", len(m.Outputs), values)
}

func keysOf(m map[string]string) []string {
	var ks []string
	for k := range m {
		ks = append(ks, k)
	}
	return ks
}

// cmdCheckInvertValues checks invert --column output: line by line, a
// blank input line gives a blank line and a number y gives y*scale +
// center rounded once (inverse) for COLUMN in MANIFEST, written so that it
// parses back to the same float64.
//
//	check-invert-values MANIFEST COLUMN IN OUT
func cmdCheckInvertValues(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "check-invert-values")
	if len(args) != 4 {
		ts.Fatalf("usage: check-invert-values MANIFEST COLUMN IN OUT")
	}
	m, err := readTestManifest(ts.MkAbs(args[0]))
	ts.Check(err)
	var center, scale float64
	found := false
	for _, c := range m.Columns {
		if c.Name == args[1] {
			center, _ = strconv.ParseFloat(string(c.Params.Center), 64)
			scale, _ = strconv.ParseFloat(string(c.Params.Scale), 64)
			found = true
		}
	}
	if !found {
		ts.Fatalf("%s has no column %s", args[0], args[1])
	}
	in := strings.Split(strings.TrimSuffix(ts.ReadFile(args[2]), "\n"), "\n")
	out := strings.Split(strings.TrimSuffix(ts.ReadFile(args[3]), "\n"), "\n")
	if len(in) != len(out) {
		ts.Fatalf("%d input lines, %d output lines", len(in), len(out))
	}
	for i := range in {
		text := strings.TrimSpace(in[i])
		if text == "" {
			if out[i] != "" {
				ts.Fatalf("line %d: blank input gave %q", i+1, out[i])
			}
			continue
		}
		y, err := strconv.ParseFloat(text, 64)
		ts.Check(err)
		want := inverse(y, center, scale)
		got, err := strconv.ParseFloat(out[i], 64)
		if err != nil || !(math.IsNaN(want) && math.IsNaN(got)) && math.Float64bits(got) != math.Float64bits(want) {
			ts.Fatalf("line %d: %q gave %q, want %v", i+1, text, out[i], want)
		}
	}
}

// cmdCheckDiff recomputes a diff --json report from the two documents it
// compares, following the documented definitions: columns paired by name
// (the old document's order, then columns only the new one has); mean
// shift (new mean - old mean) / old std, with the std the old column is
// scaled with (sample for zscore with std sample, else population), 0 for
// equal means, null when undefined or infinite; std ratio new std / old
// std (1 when both are 0); the ranges and whether the new one leaves the
// old; null rates nulls/rows; identical (type and statistics), same
// parameters (method, center, scale); exceeds |shift| > fail_over.
//
//	check-diff OLD NEW REPORT
func cmdCheckDiff(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "check-diff")
	if len(args) != 3 {
		ts.Fatalf("usage: check-diff OLD NEW REPORT")
	}
	var docs [2]map[string]any
	for i := range docs {
		v, err := readJSON(ts.MkAbs(args[i]))
		ts.Check(err)
		docs[i] = v.(map[string]any)
	}
	rv, err := readJSON(ts.MkAbs(args[2]))
	ts.Check(err)
	rep := rv.(map[string]any)
	failOver := math.Inf(1)
	if fo, ok := rep["fail_over"].(json.Number); ok {
		failOver, _ = strconv.ParseFloat(string(fo), 64)
	}
	cols := func(d map[string]any) ([]string, map[string]map[string]any) {
		var names []string
		byName := map[string]map[string]any{}
		for _, c := range d["columns"].([]any) {
			c := c.(map[string]any)
			names = append(names, c["name"].(string))
			byName[c["name"].(string)] = c
		}
		return names, byName
	}
	oldNames, oldCols := cols(docs[0])
	newNames, newCols := cols(docs[1])
	order := append([]string{}, oldNames...)
	for _, n := range newNames {
		if oldCols[n] == nil {
			order = append(order, n)
		}
	}
	got := rep["columns"].([]any)
	if len(got) != len(order) {
		ts.Fatalf("report has %d columns, want %d (%q)", len(got), len(order), order)
	}
	num := func(c map[string]any, path string) float64 {
		v, err := lookup(c, path)
		if err != nil || v == nil {
			return math.NaN()
		}
		f, _ := strconv.ParseFloat(string(v.(json.Number)), 64)
		return f
	}
	std := func(c map[string]any) float64 {
		if opts, _ := c["options"].(map[string]any); opts != nil && opts["std"] == "sample" {
			return num(c, "stats.std_sample")
		}
		return num(c, "stats.std_population")
	}
	finite := func(x float64) any {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return nil
		}
		return x
	}
	canon := func(v any) string { b, _ := json.Marshal(v); return string(b) }
	var p problems
	var exceeded []string
	for i, name := range order {
		g := got[i].(map[string]any)
		oc, nc := oldCols[name], newCols[name]
		want := map[string]any{"name": name}
		switch {
		case nc == nil:
			want["status"] = "removed"
		case oc == nil:
			want["status"] = "added"
		default:
			om, nm, os, ns := num(oc, "stats.mean"), num(nc, "stats.mean"), std(oc), std(nc)
			shift := math.NaN()
			switch {
			case math.IsNaN(om) || math.IsNaN(nm) || math.IsNaN(os):
			case om == nm:
				shift = 0
			default:
				shift = (nm - om) / os
			}
			ratio := ns / os
			if os == 0 && ns == 0 {
				ratio = 1
			}
			rate := func(c map[string]any) float64 { return num(c, "stats.nulls") / num(c, "stats.rows") }
			exceeds := math.Abs(shift) > failOver
			if exceeds {
				exceeded = append(exceeded, name)
			}
			for k, v := range map[string]any{
				"status": "both", "old_type": oc["type"], "new_type": nc["type"],
				"mean_shift": finite(shift), "std_ratio": finite(ratio),
				"old_min": finite(num(oc, "stats.min")), "old_max": finite(num(oc, "stats.max")),
				"new_min": finite(num(nc, "stats.min")), "new_max": finite(num(nc, "stats.max")),
				"below_old_min": num(nc, "stats.min") < num(oc, "stats.min"),
				"above_old_max": num(nc, "stats.max") > num(oc, "stats.max"),
				"old_null_rate": finite(rate(oc)), "new_null_rate": finite(rate(nc)),
				"null_rate_change": finite(rate(nc) - rate(oc)),
				"identical":        canon(oc["type"]) == canon(nc["type"]) && canon(oc["stats"]) == canon(nc["stats"]),
				"same_params":      canon(oc["method"]) == canon(nc["method"]) && canon(oc["params"]) == canon(nc["params"]),
				"exceeds":          exceeds,
			} {
				want[k] = v
			}
		}
		for k, w := range want {
			ok, gotText, err := matchJSON(g[k], fmt.Sprint(w))
			if w == nil {
				ok, gotText, err = g[k] == nil, fmt.Sprint(g[k]), nil
			}
			if err != nil || !ok {
				p.add("column %s: %s is %s, want %v", name, k, gotText, w)
			}
		}
	}
	if canon(rep["exceeded"]) != canon(append([]string{}, exceeded...)) {
		p.add("exceeded is %s, want %q", canon(rep["exceeded"]), exceeded)
	}
	p.fatal(ts, "check-diff "+args[2])
}

// cmdJSONLines checks a file of JSON log lines: every line must be a JSON
// object, and some line must have all the given KEY=VALUE fields (values
// compared as matchJSON does).
//
//	json-lines FILE KEY=VALUE...
func cmdJSONLines(ts *testscript.TestScript, neg bool, args []string) {
	if len(args) < 1 {
		ts.Fatalf("usage: json-lines FILE KEY=VALUE...")
	}
	data, err := os.ReadFile(ts.MkAbs(args[0]))
	ts.Check(err)
	found := false
	sc := bufio.NewScanner(bytes.NewReader(data))
	for n := 1; sc.Scan(); n++ {
		dec := json.NewDecoder(strings.NewReader(sc.Text()))
		dec.UseNumber()
		var obj map[string]any
		if err := dec.Decode(&obj); err != nil {
			ts.Fatalf("%s:%d: not a JSON object: %v", args[0], n, err)
		}
		all := true
		for _, kv := range args[1:] {
			k, v, _ := strings.Cut(kv, "=")
			if ok, _, err := matchJSON(obj[k], v); err != nil || !ok {
				all = false
				break
			}
		}
		found = found || all
	}
	if found == neg {
		ts.Fatalf("%s: %s line with %q", args[0], map[bool]string{false: "no", true: "a"}[neg], args[1:])
	}
}
