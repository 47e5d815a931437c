//go:build allseeds

package main

// seeds: every generated scene the counting tests know (see seeds_test.go).
var seeds = []int{1, 2, 3}
