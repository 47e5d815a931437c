//go:build !allseeds

package main

// seeds are the generated scenes the counting tests replay: one by default;
// `go test -tags allseeds` (and make bench) replays three.
var seeds = []int{1}
