// Package layers holds no code: its test checks that the packages keep to
// the architecture (stats and manifests pure, arrowio the only storage
// layer, cmd importing only jobs).
package layers
