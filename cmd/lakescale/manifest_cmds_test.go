package main

import (
	"bytes"
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"

	"github.com/rogpeppe/go-internal/testscript"
)

// readJSON decodes a JSON file generically, keeping numbers as text.
func readJSON(path string) (any, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.UseNumber()
	var v any
	if err := dec.Decode(&v); err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return v, nil
}

// jsonPath splits "columns[wind].stats.mean" into its steps: object keys
// and bracketed selectors.
func jsonPath(path string) []string {
	var steps []string
	for path != "" {
		switch {
		case path[0] == '.':
			path = path[1:]
		case path[0] == '[':
			end := strings.IndexByte(path, ']')
			if end < 0 {
				end = len(path) - 1
			}
			steps = append(steps, path[:end+1])
			path = path[end+1:]
		default:
			end := strings.IndexAny(path, ".[")
			if end < 0 {
				end = len(path)
			}
			steps = append(steps, path[:end])
			path = path[end:]
		}
	}
	return steps
}

// lookup follows a path through decoded JSON. Steps: an object key; [N]
// the N-th array element; [NAME] the array element whose "name" or "path"
// is NAME; # the length of an array or object.
func lookup(v any, path string) (any, error) {
	for _, step := range jsonPath(path) {
		switch x := v.(type) {
		case map[string]any:
			if step == "#" {
				v = json.Number(strconv.Itoa(len(x)))
				continue
			}
			next, ok := x[step]
			if !ok {
				return nil, fmt.Errorf("no key %q in %s", step, path)
			}
			v = next
		case []any:
			if step == "#" {
				v = json.Number(strconv.Itoa(len(x)))
				continue
			}
			sel := strings.TrimSuffix(strings.TrimPrefix(step, "["), "]")
			if i, err := strconv.Atoi(sel); err == nil {
				if i < 0 || i >= len(x) {
					return nil, fmt.Errorf("index %d out of range (%d elements) in %s", i, len(x), path)
				}
				v = x[i]
				continue
			}
			found := false
			for _, e := range x {
				if o, ok := e.(map[string]any); ok && (o["name"] == sel || o["path"] == sel) {
					v, found = e, true
					break
				}
			}
			if !found {
				return nil, fmt.Errorf("no element named %q in %s", sel, path)
			}
		default:
			return nil, fmt.Errorf("%s: cannot apply %q to %T", path, step, v)
		}
	}
	return v, nil
}

// matchJSON reports whether a decoded JSON value matches want: a number
// equal to the float64 want parses to (bit for bit; a manifest writes
// every float as the shortest text that parses back to it, so parsing
// both sides and comparing bits is the exact check), null for "null", a
// string equal to want, or matching the regular expression after a
// leading "~".
func matchJSON(v any, want string) (bool, string, error) {
	if re, ok := strings.CutPrefix(want, "~"); ok {
		rx, err := regexp.Compile(re)
		if err != nil {
			return false, "", err
		}
		s := fmt.Sprint(v)
		return rx.MatchString(s), s, nil
	}
	switch x := v.(type) {
	case nil:
		return want == "null", "null", nil
	case json.Number:
		got, err := strconv.ParseFloat(string(x), 64)
		if err != nil {
			return false, string(x), err
		}
		w, err := strconv.ParseFloat(want, 64)
		if err != nil {
			return false, string(x), nil
		}
		return math.Float64bits(got) == math.Float64bits(w), string(x), nil
	case string:
		return x == want, strconv.Quote(x), nil
	case bool:
		return strconv.FormatBool(x) == want, strconv.FormatBool(x), nil
	}
	b, _ := json.Marshal(v)
	return string(b) == want, string(b), nil
}

// cmdManifestField asserts one value of a JSON file (see lookup and
// matchJSON); WANT "=PATH2" compares with another value of the same file.
// With !, the value must be absent or different.
//
//	manifest-field FILE PATH WANT
func cmdManifestField(ts *testscript.TestScript, neg bool, args []string) {
	if len(args) != 3 {
		ts.Fatalf("usage: manifest-field FILE PATH WANT")
	}
	doc, err := readJSON(ts.MkAbs(args[0]))
	ts.Check(err)
	v, err := lookup(doc, args[1])
	if err != nil {
		if neg {
			return
		}
		ts.Fatalf("%s: %v", args[0], err)
	}
	want := args[2]
	if other, ok := strings.CutPrefix(want, "="); ok {
		// Another value of the same document, compared the same way.
		w, err := lookup(doc, other)
		ts.Check(err)
		b, err := json.Marshal(w)
		ts.Check(err)
		want = strings.Trim(string(b), `"`)
	}
	ok, got, err := matchJSON(v, want)
	ts.Check(err)
	if ok == neg {
		ts.Fatalf("%s: %s is %s, want %s%s", args[0], args[1], got, map[bool]string{true: "anything but "}[neg], args[2])
	}
}

// cmdManifestLRE asserts that a number in a JSON file agrees with a
// certified value to at least DIGITS significant digits, measured as the
// log relative error -log10(|got - cert| / |cert|).
//
//	manifest-lre FILE PATH CERTIFIED DIGITS
func cmdManifestLRE(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "manifest-lre")
	if len(args) != 4 {
		ts.Fatalf("usage: manifest-lre FILE PATH CERTIFIED DIGITS")
	}
	doc, err := readJSON(ts.MkAbs(args[0]))
	ts.Check(err)
	v, err := lookup(doc, args[1])
	ts.Check(err)
	num, ok := v.(json.Number)
	if !ok {
		ts.Fatalf("%s: %s is %v, want a number", args[0], args[1], v)
	}
	got, err := strconv.ParseFloat(string(num), 64)
	ts.Check(err)
	cert, err := strconv.ParseFloat(args[2], 64)
	ts.Check(err)
	digits, err := strconv.ParseFloat(args[3], 64)
	ts.Check(err)
	lre := math.Inf(1)
	if got != cert {
		lre = -math.Log10(math.Abs(got-cert) / math.Abs(cert))
	}
	if !(lre >= digits) {
		ts.Fatalf("%s: %s is %s, certified %s: %.1f correct digits, want at least %s", args[0], args[1], num, args[2], lre, args[3])
	}
	ts.Logf("%s: %s agrees with %s to %.1f digits", args[0], args[1], args[2], lre)
}

// cmdSHA256Of asserts that a string in a JSON file is the SHA-256
// (lowercase hex) of TARGET's bytes.
//
//	sha256-of FILE PATH TARGET
func cmdSHA256Of(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "sha256-of")
	if len(args) != 3 {
		ts.Fatalf("usage: sha256-of FILE PATH TARGET")
	}
	doc, err := readJSON(ts.MkAbs(args[0]))
	ts.Check(err)
	v, err := lookup(doc, args[1])
	ts.Check(err)
	_, sum, err := fileSHA256(ts.MkAbs(args[2]))
	ts.Check(err)
	if v != sum {
		ts.Fatalf("%s: %s is %v, sha256 of %s is %s", args[0], args[1], v, args[2], sum)
	}
}

// cmdCmpManifest compares two JSON documents ignoring created_at, or only
// the listed top-level fields with -fields, and without the values at the
// -ignore paths (a step [] means every element of an array). It prints
// each differing path.
//
//	cmp-manifest [-fields a,b] [-ignore columns[].x,...] A B
func cmdCmpManifest(ts *testscript.TestScript, neg bool, args []string) {
	fs := flag.NewFlagSet("cmp-manifest", flag.ContinueOnError)
	fields := fs.String("fields", "", "compare only these top-level fields")
	ignore := fs.String("ignore", "", "leave out the values at these paths")
	ts.Check(fs.Parse(args))
	if fs.NArg() != 2 {
		ts.Fatalf("usage: cmp-manifest [-fields a,b] [-ignore path,...] A B")
	}
	var docs [2]map[string]any
	for i := range docs {
		v, err := readJSON(ts.MkAbs(fs.Arg(i)))
		ts.Check(err)
		m, ok := v.(map[string]any)
		if !ok {
			ts.Fatalf("%s is not a JSON object", fs.Arg(i))
		}
		if _, ok := m["created_at"]; !ok {
			ts.Fatalf("%s has no created_at", fs.Arg(i))
		}
		delete(m, "created_at")
		if *fields != "" {
			keep := strings.Split(*fields, ",")
			for k := range m {
				if !slices.Contains(keep, k) {
					delete(m, k)
				}
			}
			for _, k := range keep {
				if _, ok := m[k]; !ok {
					ts.Fatalf("%s has no field %s", fs.Arg(i), k)
				}
			}
		}
		if *ignore != "" {
			for _, path := range strings.Split(*ignore, ",") {
				drop(m, jsonPath(path))
			}
		}
		docs[i] = m
	}
	var diffs []string
	jsonDiff("", docs[0], docs[1], &diffs)
	if (len(diffs) == 0) == neg {
		if neg {
			ts.Fatalf("%s and %s are equal", fs.Arg(0), fs.Arg(1))
		}
		ts.Fatalf("%s and %s differ:\n\t%s", fs.Arg(0), fs.Arg(1), strings.Join(diffs, "\n\t"))
	}
}

// drop deletes the values at a path from decoded JSON; a step "[]" goes
// into every element of an array.
func drop(v any, steps []string) {
	if len(steps) == 0 {
		return
	}
	switch x := v.(type) {
	case map[string]any:
		if len(steps) == 1 {
			delete(x, steps[0])
			return
		}
		drop(x[steps[0]], steps[1:])
	case []any:
		if steps[0] == "[]" {
			for _, e := range x {
				drop(e, steps[1:])
			}
		}
	}
}

// jsonDiff appends a line for every path where a and b differ.
func jsonDiff(path string, a, b any, diffs *[]string) {
	switch x := a.(type) {
	case map[string]any:
		y, ok := b.(map[string]any)
		if !ok {
			break
		}
		keys := map[string]bool{}
		for k := range x {
			keys[k] = true
		}
		for k := range y {
			keys[k] = true
		}
		sorted := make([]string, 0, len(keys))
		for k := range keys {
			sorted = append(sorted, k)
		}
		sort.Strings(sorted)
		for _, k := range sorted {
			jsonDiff(path+"."+k, x[k], y[k], diffs)
		}
		return
	case []any:
		y, ok := b.([]any)
		if !ok || len(x) != len(y) {
			break
		}
		for i := range x {
			jsonDiff(fmt.Sprintf("%s[%d]", path, i), x[i], y[i], diffs)
		}
		return
	}
	if !reflect.DeepEqual(a, b) {
		ja, _ := json.Marshal(a)
		jb, _ := json.Marshal(b)
		*diffs = append(*diffs, fmt.Sprintf("%s: %s != %s", path, ja, jb))
	}
}

// cmdCmpTree asserts that two datasets hold the same *.parquet files
// (same relative paths) with byte-identical contents.
//
//	cmp-tree A B
func cmdCmpTree(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "cmp-tree")
	if len(args) != 2 {
		ts.Fatalf("usage: cmp-tree A B")
	}
	a, b := ts.MkAbs(args[0]), ts.MkAbs(args[1])
	ra, err := listParquet(a)
	ts.Check(err)
	rb, err := listParquet(b)
	ts.Check(err)
	if !slices.Equal(ra, rb) {
		ts.Fatalf("%s holds %q, %s holds %q", args[0], ra, args[1], rb)
	}
	if len(ra) == 0 {
		ts.Fatalf("%s holds no parquet files", args[0])
	}
	for _, rel := range ra {
		da, err := os.ReadFile(filepath.Join(a, filepath.FromSlash(rel)))
		ts.Check(err)
		db, err := os.ReadFile(filepath.Join(b, filepath.FromSlash(rel)))
		ts.Check(err)
		if !bytes.Equal(da, db) {
			ts.Fatalf("%s differs between %s and %s", rel, args[0], args[1])
		}
	}
	ts.Logf("cmp-tree: %d files identical", len(ra))
}
