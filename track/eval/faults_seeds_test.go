//go:build !allseeds

package eval_test

// studySeeds are the seeds TestFaultStudy runs by default: one, to keep
// `go test` quick. `go test -tags allseeds` runs those of
// faults_allseeds_test.go.
var studySeeds = []uint64{1}
