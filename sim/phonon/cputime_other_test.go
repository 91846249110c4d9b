//go:build !unix

package phonon

func cpuSeconds() float64 { return 0 }
