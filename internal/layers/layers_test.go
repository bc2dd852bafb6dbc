package layers

import (
	"os/exec"
	"strings"
	"testing"
)

const module = "github.com/lakescale/lakescale/"

// rule: the package at path may not import any of deny (standard-library
// paths or module-relative paths).
var rules = []struct {
	pkg  string
	deny []string
}{
	{"stats", []string{"os", "io/fs", "path/filepath", "sync", "arrowio", "jobs", "manifests", "github.com/apache/arrow/go/v17/parquet"}},
	{"manifests", []string{"os", "io/fs", "path/filepath", "sync", "arrowio", "jobs", "stats"}},
	{"arrowio", []string{"jobs", "stats", "manifests"}},
	{"jobs", []string{"os", "io/fs"}},
	{"cmd/lakescale", []string{"arrowio", "stats", "manifests", "github.com/apache/arrow/go/v17/parquet"}},
}

// TestLayers reads the real import lists from the go command.
func TestLayers(t *testing.T) {
	out, err := exec.Command("go", "list", "-f", `{{.ImportPath}} {{join .Imports " "}}`, module+"...").Output()
	if err != nil {
		t.Fatalf("go list: %v", err)
	}
	imports := map[string][]string{}
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		f := strings.Fields(line)
		imports[strings.TrimPrefix(f[0], module)] = f[1:]
	}
	for _, r := range rules {
		imps, ok := imports[r.pkg]
		if !ok {
			t.Errorf("package %s not found by go list", r.pkg)
			continue
		}
		for _, imp := range imps {
			for _, d := range r.deny {
				target := d
				if !strings.Contains(d, ".") && !isStd(d) {
					target = module + d
				}
				if imp == target || strings.HasPrefix(imp, target+"/") {
					t.Errorf("%s imports %s; the layer rules forbid it", r.pkg, imp)
				}
			}
		}
	}
}

func isStd(p string) bool {
	switch strings.SplitN(p, "/", 2)[0] {
	case "os", "io", "path", "sync":
		return true
	}
	return false
}
