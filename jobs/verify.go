package jobs

import (
	"context"
	"errors"
	"fmt"
	"io"

	"github.com/lakescale/lakescale/arrowio"
	"github.com/lakescale/lakescale/manifests"
)

// Verify re-hashes every output file of the dataset in dir and checks its
// size, rows and embedded parameters against dir/_manifest.json. Every
// mismatch is printed; the error wraps ErrVerify when there is any.
func Verify(ctx context.Context, w io.Writer, dir string) error {
	m, _, err := readManifest(arrowio.Join(dir, ManifestName))
	if err != nil {
		return err
	}
	key := manifests.MetadataKey
	switch m.Kind {
	case manifests.KindDataset:
	case manifests.KindInverted:
		key = InvertedMetadataKey
	default:
		return fmt.Errorf("%s: %w: kind %s, want %s or %s", arrowio.Join(dir, ManifestName), manifests.ErrInvalid, m.Kind, manifests.KindDataset, manifests.KindInverted)
	}
	want := m.FileParams()
	var problems []string
	report := func(format string, args ...any) {
		msg := fmt.Sprintf(format, args...)
		problems = append(problems, msg)
		fmt.Fprintln(w, "MISMATCH "+msg)
	}
	listed := make(map[string]bool, len(m.Outputs))
	for _, o := range m.Outputs {
		if err := context.Cause(ctx); err != nil {
			return err
		}
		listed[o.Path] = true
		path := arrowio.Join(dir, o.Path)
		size, sum, err := arrowio.HashFileContext(ctx, path)
		if cerr := context.Cause(ctx); cerr != nil {
			return cerr
		}
		if err != nil {
			report("%s: %v", o.Path, err)
			continue
		}
		if size != o.Bytes {
			report("%s: %d bytes, manifest says %d", o.Path, size, o.Bytes)
		}
		if sum != o.SHA256 {
			report("%s: sha256 %s, manifest says %s", o.Path, sum, o.SHA256)
		}
		rows, _, meta, err := arrowio.ReadFooter(path)
		if err != nil {
			report("%s: %v", o.Path, err)
			continue
		}
		if rows != o.Rows {
			report("%s: %d rows, manifest says %d", o.Path, rows, o.Rows)
		}
		got, err := manifests.DecodeFileParams(meta[key])
		if err != nil {
			report("%s: embedded parameters: %v", o.Path, err)
			continue
		}
		if !sameParams(got, want) {
			report("%s: embedded parameters differ from the manifest's", o.Path)
		}
	}
	files, err := arrowio.Discover(dir)
	if err != nil && !errors.Is(err, arrowio.ErrNoInputs) {
		report("listing %s: %v", dir, err)
	}
	for _, f := range files {
		if !listed[f.Rel] {
			report("%s: not listed in the manifest", f.Rel)
		}
	}
	if len(problems) > 0 {
		return fmt.Errorf("%w: %s: %d mismatches", ErrVerify, dir, len(problems))
	}
	fmt.Fprintf(w, "ok: %d files match %s\n", len(m.Outputs), arrowio.Join(dir, ManifestName))
	return nil
}

func sameParams(a, b manifests.FileParams) bool {
	if a.Version != b.Version || len(a.Columns) != len(b.Columns) {
		return false
	}
	for i := range a.Columns {
		if a.Columns[i] != b.Columns[i] {
			return false
		}
	}
	return true
}
