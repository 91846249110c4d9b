package ports

import (
	"context"
	"os"
	"path/filepath"
	"regexp"
	"testing"

	"github.com/gliss-lab/gliss/drivers/benchfile"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

// Traffic captured over the virtual ports, played back by the replay
// transport, gives the driver the same readings: the regression test of a
// driver on recorded lab traffic.
func TestRecordedTrafficReplays(t *testing.T) {
	s := start(t, Options{Sim: simbench.Options{Seed: 11, Instant: true}})
	path, err := s.WriteBenchYAML()
	if err != nil {
		t.Fatal(err)
	}
	recDir := t.TempDir()
	live, err := benchfile.Load(context.Background(), path, benchfile.Options{RecordDir: recDir})
	if err != nil {
		t.Fatal(err)
	}
	c1, p1 := mapCounts(t, live)
	live.Close()
	files, _ := filepath.Glob(filepath.Join(recDir, "transactions-*.jsonl"))
	if len(files) != 1 {
		t.Fatalf("recordings: %v", files)
	}
	// Same bench file, every transport replaced by the recording.
	text := regexp.MustCompile(`transport: \{serial: [^}]*\}`).ReplaceAllString(s.BenchYAML(), "transport: {replay: "+files[0]+"}")
	rpath := filepath.Join(t.TempDir(), "replay.yaml")
	if err := os.WriteFile(rpath, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	s.Close() // the device is gone: only the recording answers now
	replayed, err := benchfile.Load(context.Background(), rpath, benchfile.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer replayed.Close()
	c2, p2 := mapCounts(t, replayed)
	for i := range c1 {
		if c1[i][0] != c2[i][0] || c1[i][1] != c2[i][1] || p1[i] != p2[i] {
			t.Fatalf("point %d: live %v %v µW, replayed %v %v µW", i, c1[i], p1[i], c2[i], p2[i])
		}
	}
}
