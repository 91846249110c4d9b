package daemon

import (
	"math"
	"os"
	"runtime/debug"
	"runtime/metrics"
)

// glissd's garbage-collector policy (ApplyGCPolicy).
const (
	// GCPercent is the heap growth between collections, in percent of the
	// live heap (Go's default is 100). A scan at full speed allocates about
	// 1 KiB per point (the point and bbolt's own working memory), so with
	// the default the collector ran some 20 times a second and took a
	// quarter of the daemon's CPU: BENCHMARKS.md has the figures.
	GCPercent = 400
	// MemoryLimitBytes is the soft limit on the Go runtime's memory: near it
	// the collector runs as often as it must, whatever GCPercent says, so the
	// larger growth never takes the daemon past its memory budget (≤ 100 MB
	// resident after storing and exporting a 100,000-point scan). The
	// database's memory map is not part of it.
	MemoryLimitBytes = 48 << 20
)

// ApplyGCPolicy sets the collector to GCPercent and the soft memory limit
// to MemoryLimitBytes, each unless the environment already sets it (GOGC,
// GOMEMLIMIT: an operator's choice wins). glissd and the embedded daemon of
// `gliss demo` call it at start; it changes the whole process, so a program
// that embeds the daemon for its own purposes decides itself. It returns
// the settings in force (gcPercent −1: collection off).
func ApplyGCPolicy() (gcPercent int, memoryLimitBytes int64) {
	if os.Getenv("GOGC") == "" {
		debug.SetGCPercent(GCPercent)
	}
	if os.Getenv("GOMEMLIMIT") == "" {
		debug.SetMemoryLimit(MemoryLimitBytes)
	}
	return gcSettings()
}

// gcSettings reads the collector's settings from runtime/metrics, without
// changing them.
func gcSettings() (gcPercent int, memoryLimitBytes int64) {
	s := []metrics.Sample{{Name: "/gc/gogc:percent"}, {Name: "/gc/gomemlimit:bytes"}}
	metrics.Read(s)
	gcPercent = -1 // GOGC=off reads as the largest uint64
	if pct := s[0].Value.Uint64(); pct <= math.MaxInt32 {
		gcPercent = int(pct)
	}
	return gcPercent, int64(min(s[1].Value.Uint64(), math.MaxInt64))
}
