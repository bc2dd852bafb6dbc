package stats

// Infinities reports how many +Inf and -Inf values have been added so far.
// It is cheap (no big-number work), so callers can check it per batch.
func (a *Accumulator) Infinities() (pos, neg uint64) { return a.posInf, a.negInf }
