package main

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"regexp"
	"strconv"

	"github.com/rogpeppe/go-internal/testscript"
)

// cmdCheckShards reads the N results of a sharded measure or apply from
// WORK/KIND (KIND measure or apply) and asserts, independently of the
// program, what the results promise: exactly the files
// shard-IIII-of-NNNN.json for I < N, each naming its own shard, one job
// and one input listing in all, every input of the listing in exactly
// one shard (as many inputs and bytes as the listing counts), and shares
// balanced by bytes to within the largest input.
//
//	check-shards WORK measure|apply N
func cmdCheckShards(ts *testscript.TestScript, neg bool, args []string) {
	noNeg(ts, neg, "check-shards")
	if len(args) != 3 || (args[1] != "measure" && args[1] != "apply") {
		ts.Fatalf("usage: check-shards WORK measure|apply N")
	}
	n, err := strconv.Atoi(args[2])
	ts.Check(err)
	dir := ts.MkAbs(filepath.Join(args[0], args[1]))
	entries, err := os.ReadDir(dir)
	ts.Check(err)
	name := regexp.MustCompile(`^shard-\d+-of-\d+\.json$`)
	found := 0
	for _, e := range entries {
		if name.MatchString(e.Name()) {
			found++
		}
	}
	if found != n {
		ts.Fatalf("%s holds %d shard results, want %d", dir, found, n)
	}
	type doc struct {
		Job     struct{ SHA256 string }
		Shard   struct{ Index, Count int }
		Listing struct {
			Files int
			Bytes int64
		}
		Files []struct {
			Input struct {
				Path  string
				Bytes int64
			}
		}
	}
	var first doc
	seen := map[string]int{}
	var total, largest int64
	loads := make([]int64, n)
	for i := range n {
		path := filepath.Join(dir, fmt.Sprintf("shard-%04d-of-%04d.json", i, n))
		data, err := os.ReadFile(path)
		ts.Check(err)
		var d doc
		ts.Check(json.Unmarshal(data, &d))
		if d.Shard.Index != i || d.Shard.Count != n {
			ts.Fatalf("%s holds shard %d of %d", path, d.Shard.Index, d.Shard.Count)
		}
		if i == 0 {
			first = d
		} else if d.Job.SHA256 != first.Job.SHA256 || d.Listing != first.Listing {
			ts.Fatalf("%s: job %s, listing %+v; shard 0: job %s, listing %+v", path, d.Job.SHA256, d.Listing, first.Job.SHA256, first.Listing)
		}
		for _, f := range d.Files {
			if j, dup := seen[f.Input.Path]; dup {
				ts.Fatalf("input %s is in shards %d and %d", f.Input.Path, j, i)
			}
			seen[f.Input.Path] = i
			total += f.Input.Bytes
			loads[i] += f.Input.Bytes
			largest = max(largest, f.Input.Bytes)
		}
	}
	if len(seen) != first.Listing.Files || total != first.Listing.Bytes {
		ts.Fatalf("the shards hold %d inputs of %d bytes; the listing %d of %d", len(seen), total, first.Listing.Files, first.Listing.Bytes)
	}
	lo, hi := loads[0], loads[0]
	for _, l := range loads {
		lo, hi = min(lo, l), max(hi, l)
	}
	if hi-lo > largest {
		ts.Fatalf("shard loads %v bytes differ by more than the largest input (%d)", loads, largest)
	}
	ts.Logf("check-shards: %d inputs in %d shards, loads %v bytes", len(seen), n, loads)
}
