package model

import (
	"syscall"
	"testing"
	"time"
)

// cpuTime is the CPU time used by this process (user + system). The machine
// is shared, so benchmarks also report CPU seconds, which other load does not
// inflate as much as wall time.
func cpuTime(tb testing.TB) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		tb.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
