package jobs

import (
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
