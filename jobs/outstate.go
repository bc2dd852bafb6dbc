package jobs

import (
	"bytes"
	"fmt"
	"io"
	"time"

	"github.com/lakescale/lakescale/arrowio"
)

// outState is what an output location holds, as every command that
// writes or cleans one sees it.
type outState int

const (
	outEmpty       outState = iota // absent, or only the lock, cache and temporary files
	outCommitted                   // a manifest: a complete dataset, whatever else is there
	outUncommitted                 // the marker and no manifest: a run that has not committed
	outForeign                     // other files, neither manifest nor marker: not lakescale's
)

// outputState classifies the output folder out. The manifest wins: a
// folder holding both it and the marker (a commit killed between writing
// the one and removing the other) is a committed dataset. foreign names a
// file that made the folder foreign.
func outputState(out string) (state outState, foreign string, err error) {
	state, foreign, _, err = outputStateMarker(out)
	return state, foreign, err
}

// Marker texts: a run's (run, apply, invert) and a sharded apply's.
const (
	markerRun     = "lakescale run started"
	markerSharded = "lakescale sharded apply started"
)

// outputStateMarker is outputState that also says, for an uncommitted
// output, whether its marker is a sharded apply's (whose shards may still
// be writing) rather than a run's.
func outputStateMarker(out string) (state outState, foreign string, sharded bool, err error) {
	state, foreign, err = classifyOutput(out)
	if err != nil || state != outUncommitted {
		return state, foreign, false, err
	}
	b, err := arrowio.ReadFile(arrowio.Join(out, markerName))
	if err != nil {
		return 0, "", false, err
	}
	return state, "", bytes.HasPrefix(b, []byte(markerSharded)), nil
}

// writeMarker marks out uncommitted, saying who started writing it.
func writeMarker(cfg *Config, who, until string) error {
	text := fmt.Sprintf("%s %s; this output is not committed until %s\n", who, cfg.Now().UTC().Format(time.RFC3339), until)
	return arrowio.WriteFileAtomic(arrowio.Join(cfg.Output, markerName), func(w io.Writer) error {
		_, err := io.WriteString(w, text)
		return err
	})
}

// classifyOutput is outputState without reading the marker.
func classifyOutput(out string) (state outState, foreign string, err error) {
	names, _, err := arrowio.ListDir(out)
	if err != nil {
		return 0, "", err
	}
	manifest, marker := false, false
	for _, n := range names {
		switch {
		case n == ManifestName:
			manifest = true
		case n == markerName:
			marker = true
		case n == lockName || n == cacheDirName || arrowio.IsTempName(n):
		case foreign == "":
			foreign = n
		}
	}
	switch {
	case manifest:
		return outCommitted, "", nil
	case marker:
		return outUncommitted, "", nil
	case foreign != "":
		return outForeign, foreign, nil
	}
	return outEmpty, "", nil
}
