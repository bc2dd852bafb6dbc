package jobs

import (
	"bytes"
	"context"
	"errors"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/lakescale/lakescale/arrowio"
)

// listTree returns the regular files below dir, slash-separated and
// relative to it.
func listTree(t *testing.T, dir string) []string {
	t.Helper()
	var out []string
	err := filepath.WalkDir(dir, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		out = append(out, filepath.ToSlash(rel))
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// Clean removes what a killed run left (outputs, marker, temporary files,
// empty folders), after which the output is accepted by the next run.
func TestCleanUncommitted(t *testing.T) {
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	writeDemoLake(t, lake)
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatal(err)
	}
	// What a run killed half-way through pass two leaves: the marker, no
	// manifest, some outputs and a temporary file.
	if err := os.Remove(filepath.Join(out, ManifestName)); err != nil {
		t.Fatal(err)
	}
	writeText(t, filepath.Join(out, markerName), "run started\n")
	writeText(t, filepath.Join(out, "site="+demoSites[0], ".part-1.parquet.tmp-123"), "half")

	cfg := testConfig(t, lake, out, 1)
	var msg bytes.Buffer
	cfg.Out = &msg
	if err := Clean(context.Background(), cfg); err != nil {
		t.Fatal(err)
	}
	for _, f := range listTree(t, out) {
		if !strings.HasPrefix(f, cacheDirName+"/") { // the cache stays
			t.Errorf("left after clean: %s", f)
		}
	}
	if _, err := os.Stat(filepath.Join(out, "site="+demoSites[0])); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("empty partition folder left after clean: %v", err)
	}
	if !strings.Contains(msg.String(), "uncommitted run") {
		t.Errorf("message %q does not say the run was uncommitted", msg.String())
	}
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatalf("run after clean: %v", err)
	}
}

// Clean never removes a committed dataset's files; it removes only
// temporary files, and the dataset still verifies.
func TestCleanKeepsCommitted(t *testing.T) {
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	writeDemoLake(t, lake)
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatal(err)
	}
	before := listTree(t, out)
	writeText(t, filepath.Join(out, ".x.parquet.tmp-9"), "half")
	if err := Clean(context.Background(), testConfig(t, lake, out, 1)); err != nil {
		t.Fatal(err)
	}
	if after := listTree(t, out); strings.Join(after, ",") != strings.Join(before, ",") {
		t.Errorf("files changed by clean:\nbefore %v\nafter  %v", before, after)
	}
	if err := Verify(context.Background(), io.Discard, out); err != nil {
		t.Fatal(err)
	}
}

// A folder lakescale did not write is refused and left untouched.
func TestCleanRefusesForeignTree(t *testing.T) {
	tmp := t.TempDir()
	out := filepath.Join(tmp, "mine")
	writeText(t, filepath.Join(out, "notes.txt"), "keep me\n")
	writeText(t, filepath.Join(out, "data.parquet"), "not ours\n")
	cfg := testConfig(t, tmp, out, 1)
	err := Clean(context.Background(), cfg)
	if !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), out) {
		t.Fatalf("err = %v; want ErrOutputNotEmpty naming %s", err, out)
	}
	if left := listTree(t, out); len(left) != 2 {
		t.Errorf("clean touched a foreign tree: %v", left)
	}
}

// A second commit of the same output is refused by the create-only-if-
// absent write, and the first manifest stays.
func TestSecondCommitRefused(t *testing.T) {
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	writeDemoLake(t, lake)
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(out, ManifestName)
	first, _ := os.ReadFile(path)
	m := readManifestT(t, path)
	m.CreatedAt = "2030-01-01T00:00:00Z"
	err := writeManifest(path, m, false)
	if !errors.Is(err, fs.ErrExist) || !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), path) {
		t.Fatalf("second commit: %v; want a refusal naming %s", err, path)
	}
	if again, _ := os.ReadFile(path); !bytes.Equal(again, first) {
		t.Error("the refused commit changed the manifest")
	}
	if ok, _ := arrowio.Exists(path); !ok {
		t.Error("manifest gone")
	}
}

// A commit killed between creating the manifest and removing the marker
// leaves both: that is a committed dataset, which run refuses to replace
// without --overwrite and clean keeps (removing only the marker).
func TestManifestWinsOverMarker(t *testing.T) {
	tmp := t.TempDir()
	lake, out := filepath.Join(tmp, "lake"), filepath.Join(tmp, "out")
	writeDemoLake(t, lake)
	if err := Run(context.Background(), testConfig(t, lake, out, 2)); err != nil {
		t.Fatal(err)
	}
	writeText(t, filepath.Join(out, markerName), "run started\n")
	before := listTree(t, out)
	err := Run(context.Background(), testConfig(t, lake, out, 2))
	if !errors.Is(err, ErrOutputNotEmpty) || !strings.Contains(err.Error(), "committed dataset") {
		t.Fatalf("run over manifest + marker without --overwrite: %v; want a refusal", err)
	}
	if after := listTree(t, out); strings.Join(after, ",") != strings.Join(before, ",") {
		t.Fatalf("the refused run changed the output:\n%v\n%v", before, after)
	}
	if err := Clean(context.Background(), testConfig(t, lake, out, 1)); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(out, markerName)); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("marker left beside the manifest: %v", err)
	}
	if err := Verify(context.Background(), io.Discard, out); err != nil {
		t.Fatal(err)
	}
}

// Commit re-reads each output's footer: a file carrying other parameters
// than the run's (here swapped in under the run's feet) is not committed.
func TestCommitChecksFooterParameters(t *testing.T) {
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoLake(t, lake)
	other := filepath.Join(tmp, "other")
	cfg, err := Load("", Overrides{Input: &lake, Output: &other, Method: ptr("minmax")})
	if err != nil {
		t.Fatal(err)
	}
	if err := Run(context.Background(), cfg); err != nil {
		t.Fatal(err)
	}
	out := filepath.Join(tmp, "out")
	defer func(h func()) { hookOutputsInPlace = h }(hookOutputsInPlace)
	hookOutputsInPlace = func() {
		files, err := arrowio.Discover(other)
		if err != nil || len(files) == 0 {
			t.Errorf("outputs of the other run: %v, %v", files, err)
			return
		}
		b, err := os.ReadFile(files[0].Abs)
		if err != nil {
			t.Error(err)
		}
		writeText(t, filepath.Join(out, filepath.FromSlash(files[0].Rel)), string(b))
	}
	err = Run(context.Background(), testConfig(t, lake, out, 1))
	if err == nil || !strings.Contains(err.Error(), "parameters in its footer") {
		t.Fatalf("commit over a file of other parameters: %v", err)
	}
	if _, err := os.Stat(filepath.Join(out, ManifestName)); !errors.Is(err, fs.ErrNotExist) {
		t.Fatalf("manifest written: %v", err)
	}
}
