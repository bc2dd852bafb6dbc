package arrowio

import (
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"io/fs"
)

// ErrNoConditionalCreate marks a store that cannot carry out
// create-only-if-absent writes: one that replaced an existing object on
// such a write, rejects the condition (HTTP 501), or (a local file system)
// cannot make hard links. CreateFile cannot keep two commits apart there.
var ErrNoConditionalCreate = errors.New("the store does not refuse a second create of the same object (create-only-if-absent writes are not honoured)")

// CheckConditionalCreate checks that the store holding the folder loc
// honours CreateFile: it creates a probe object ".create-check.tmp-<random>"
// in loc (a temporary name, see IsTempName), creates it a second time,
// which must fail with fs.ErrExist, and removes it. A store that accepts the second create gives an error
// wrapping ErrNoConditionalCreate. On local disk it also finds file
// systems without hard links, where CreateFile cannot work.
func CheckConditionalCreate(loc string) (err error) {
	var id [8]byte
	if _, err := rand.Read(id[:]); err != nil {
		return err
	}
	probe := Join(loc, ".create-check.tmp-"+hex.EncodeToString(id[:]))
	write := func(s string) func(io.Writer) error {
		return func(w io.Writer) error {
			_, err := io.WriteString(w, s)
			return err
		}
	}
	if err := CreateFile(probe, write("first\n")); err != nil {
		return fmt.Errorf("check create-only-if-absent writes in %s: %w", loc, err)
	}
	defer func() {
		if rerr := Remove(probe); err == nil {
			err = rerr
		}
	}()
	err = CreateFile(probe, write("second\n"))
	switch {
	case err == nil:
		return fmt.Errorf("check create-only-if-absent writes in %s: %w", loc, ErrNoConditionalCreate)
	case errors.Is(err, fs.ErrExist):
		return nil
	default:
		return fmt.Errorf("check create-only-if-absent writes in %s: %w", loc, err)
	}
}
