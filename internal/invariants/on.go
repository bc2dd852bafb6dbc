//go:build invariants

package invariants

// Enabled reports whether cheap internal consistency checks run. It is true
// in builds with the invariants tag (go test -tags invariants).
const Enabled = true
