// Package invariants gates cheap internal consistency checks. Code tests
// invariants.Enabled, a constant, so the checks compile away in ordinary
// builds and run under go test -tags invariants.
package invariants
