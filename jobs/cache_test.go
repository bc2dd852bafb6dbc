package jobs

import (
	"context"
	"path/filepath"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"

	"github.com/lakescale/lakescale/arrowio"
)

// measureOneDemoFile writes one demo file into a lake of its own and
// measures it with pass one, as a one-worker run would.
func measureOneDemoFile(t *testing.T) (*plan, fileResult) {
	t.Helper()
	tmp := t.TempDir()
	lake := filepath.Join(tmp, "lake")
	writeDemoFile(t, lake, demoRel(0, 0), 0, 0)
	cfg := testConfig(t, lake, filepath.Join(tmp, "out"), 1)
	p, err := discover(lake, cfg.Rules)
	if err != nil {
		t.Fatal(err)
	}
	res, err := measureFile(context.Background(), &cfg, p, 0)
	if err != nil {
		t.Fatal(err)
	}
	return p, res
}

// A real entry decodes to the result it was made from; every single-byte
// change, every truncation and an extension are rejected as corrupt, and
// a key that differs in any part makes the entry stale.
func TestCacheEntryDamage(t *testing.T) {
	p, res := measureOneDemoFile(t)
	r, err := arrowio.Open(p.Files[0].Abs, memory.DefaultAllocator)
	if err != nil {
		t.Fatal(err)
	}
	defer r.Close()
	k, err := keyOf(p, 0, r.FooterChecksum())
	if err != nil {
		t.Fatal(err)
	}
	data, err := encodeEntry(k, res)
	if err != nil {
		t.Fatal(err)
	}

	got, state := decodeEntry(data, k)
	if state != cacheHit || got.Rows != res.Rows || got.SHA256 != res.SHA256 || len(got.Accs) != len(res.Accs) {
		t.Fatalf("intact entry: state %d, %+v", state, got)
	}
	for j := range res.Accs {
		a, _ := res.Accs[j].MarshalBinary()
		b, _ := got.Accs[j].MarshalBinary()
		if string(a) != string(b) {
			t.Fatalf("column %s: state changed through the cache", p.Columns[j].Name)
		}
	}

	for i := range data {
		bad := append([]byte(nil), data...)
		bad[i] ^= 0x01
		if _, s := decodeEntry(bad, k); s != cacheCorrupt {
			t.Fatalf("byte %d flipped: state %d, want corrupt", i, s)
		}
	}
	for n := range len(data) {
		if _, s := decodeEntry(data[:n], k); s != cacheCorrupt {
			t.Fatalf("truncated to %d bytes: state %d, want corrupt", n, s)
		}
	}
	if _, s := decodeEntry(append(append([]byte(nil), data...), 0), k); s != cacheCorrupt {
		t.Fatalf("extended entry: state %d, want corrupt", s)
	}

	other := k
	other.Rel = "site=x/part-0.parquet"
	if _, s := decodeEntry(data, other); s != cacheCorrupt {
		t.Fatalf("another file's entry: state %d, want corrupt", s)
	}
	for name, change := range map[string]func(*cacheKey){
		"size":    func(k *cacheKey) { k.Size++ },
		"mtime":   func(k *cacheKey) { k.ModTimeNS++ },
		"footer":  func(k *cacheKey) { k.Footer[7] ^= 1 },
		"columns": func(k *cacheKey) { k.Columns = k.Columns[1:] },
		"type": func(k *cacheKey) {
			k.Columns = append([]column(nil), k.Columns...)
			k.Columns[0].Type = k.Columns[1].Type
		},
	} {
		kk := k
		change(&kk)
		if _, s := decodeEntry(data, kk); s != cacheStale {
			t.Errorf("key %s changed: state %d, want stale", name, s)
		}
	}
}
