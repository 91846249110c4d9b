package daemon

import (
	"runtime/debug"
	"testing"
)

// ApplyGCPolicy sets glissd's collector settings, unless the environment
// names its own (then the runtime's settings stay as they are).
func TestApplyGCPolicy(t *testing.T) {
	oldPct := debug.SetGCPercent(123)
	oldLimit := debug.SetMemoryLimit(1 << 40)
	t.Cleanup(func() {
		debug.SetGCPercent(oldPct)
		debug.SetMemoryLimit(oldLimit)
	})

	t.Setenv("GOGC", "150")
	t.Setenv("GOMEMLIMIT", "1TiB")
	if pct, limit := ApplyGCPolicy(); pct != 123 || limit != 1<<40 {
		t.Fatalf("with GOGC and GOMEMLIMIT set: %d %%, %d bytes; want the runtime's 123 %%, %d bytes", pct, limit, int64(1<<40))
	}

	t.Setenv("GOGC", "")
	t.Setenv("GOMEMLIMIT", "")
	if pct, limit := ApplyGCPolicy(); pct != GCPercent || limit != MemoryLimitBytes {
		t.Fatalf("without: %d %%, %d bytes; want %d %%, %d bytes", pct, limit, GCPercent, MemoryLimitBytes)
	}

	debug.SetGCPercent(-1)
	if pct, _ := gcSettings(); pct != -1 {
		t.Errorf("collection off reads as %d %%, want -1", pct)
	}
}
