package onnx

import (
	"syscall"
	"time"
)

// rusageThread is RUSAGE_THREAD of getrusage(2) on Linux.
const rusageThread = 1

// threadCPU is the CPU time (user + system) the calling OS thread has used;
// callers lock the goroutine to its thread around a measurement.
func threadCPU() time.Duration { return rusage(rusageThread) }

// processCPU is the CPU time every thread of the process has used.
func processCPU() time.Duration { return rusage(syscall.RUSAGE_SELF) }

func rusage(who int) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(who, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
