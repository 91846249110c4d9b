//go:build unix

package phonon

import "syscall"

// cpuSeconds is the process's user + system CPU time, s.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if syscall.Getrusage(syscall.RUSAGE_SELF, &ru) != nil {
		return 0
	}
	return float64(ru.Utime.Sec+ru.Stime.Sec) + 1e-6*float64(ru.Utime.Usec+ru.Stime.Usec)
}
