//go:build allseeds

package eval_test

// studySeeds are the seeds TestFaultStudy runs with the allseeds build tag.
var studySeeds = []uint64{1, 2, 3, 4, 5}
