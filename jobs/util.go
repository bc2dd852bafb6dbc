package jobs

import "sort"

// sortBy sorts s stably by an integer key.
func sortBy[T any](s []T, key func(T) int) {
	sort.SliceStable(s, func(i, j int) bool { return key(s[i]) < key(s[j]) })
}
