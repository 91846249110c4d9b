package cli

import (
	"bytes"
	"context"
	"image/png"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/client/npy"
	"github.com/gliss-lab/gliss/service/daemon"
)

// startTestDaemon runs glissd in process on the simulated bench, 1000×
// faster than real time.
func startTestDaemon(t *testing.T) string {
	t.Helper()
	ctx := context.Background()
	d, err := daemon.Start(ctx, daemon.Config{Listen: "127.0.0.1:0", DataDir: t.TempDir(), SimSeed: 5, SimSpeed: 1000})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := d.Stop(sctx); err != nil {
			t.Errorf("stop: %v", err)
		}
	})
	return d.Addr()
}

func cliRun(t *testing.T, ctx context.Context, args ...string) (string, string, error) {
	t.Helper()
	var o, e bytes.Buffer
	err := Run(ctx, &Env{Stdout: &o, Stderr: &e, Stdin: strings.NewReader(""), Getenv: func(string) string { return "" }}, args)
	return o.String(), e.String(), err
}

// keepPNG copies a figure to $GLISS_PLOT_DIR, to look at.
func keepPNG(t *testing.T, path string) {
	if dir := os.Getenv("GLISS_PLOT_DIR"); dir != "" {
		b, _ := os.ReadFile(path)
		os.WriteFile(filepath.Join(dir, filepath.Base(path)), b, 0o644)
	}
}

func TestScanPlotExportNPYAndWatch(t *testing.T) {
	addr := startTestDaemon(t)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	dir := t.TempDir()

	// A power × chirp map, followed with gliss's own watch (not a terminal: plain lines).
	id, stderr, err := cliRun(t, ctx, "scan", "map", "--server", addr, "--gdd-ps2", "-25:25:11", "--power-uw", "0.05:64:17",
		"--spacing", "amplitude", "--gate-ms", "200", "--snake", "--name", "plot test", "--watch")
	if err != nil {
		t.Fatalf("scan map: %v\n%s", err, stderr)
	}
	id = strings.TrimSpace(id)
	if !strings.Contains(stderr, "progress: 187/187 points (100%), ETA 0s, last point x=") || !strings.Contains(stderr, "SUCCEEDED") {
		t.Errorf("watch output lacks the final progress line or state:\n%s", stderr)
	}

	// Heat map.
	mapPNG := filepath.Join(dir, "map_xx.png")
	if _, stderr, err := cliRun(t, ctx, "scan", "plot", id, "-o", mapPNG, "--server", addr); err != nil {
		t.Fatalf("scan plot: %v\n%s", err, stderr)
	}
	checkPNG(t, mapPNG, 945, 709)
	keepPNG(t, mapPNG)

	// Unknown channel: the error lists the channels.
	if _, _, err := cliRun(t, ctx, "scan", "plot", id, "-o", mapPNG, "--channel", "q", "--server", addr); err == nil || ExitCode(err) != 2 || !strings.Contains(err.Error(), "x, xx") {
		t.Errorf("--channel q: %v", err)
	}

	// NumPy export into a directory: shapes, axes and counts as stored.
	npyDir := filepath.Join(dir, "npy")
	if _, stderr, err := cliRun(t, ctx, "scan", "export", id, "--format", "npy", "-o", npyDir, "--server", addr); err != nil {
		t.Fatalf("export npy: %v\n%s", err, stderr)
	}
	read := func(name string) *npy.Array {
		f, err := os.Open(filepath.Join(npyDir, name+".npy"))
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		a, err := npy.Read(f)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		return a
	}
	gdd, power, xx := read("gdd_ps2"), read("power_uw"), read("counts_xx")
	if len(gdd.F64) != 11 || len(power.F64) != 17 || len(xx.Shape) != 2 || xx.Shape[0] != 11 || xx.Shape[1] != 17 {
		t.Fatalf("shapes: gdd %v power %v xx %v", gdd.Shape, power.Shape, xx.Shape)
	}
	if gdd.F64[0] != -25 || gdd.F64[10] != 25 || power.F64[0] != 0.05 || power.F64[16] != 64 {
		t.Errorf("axis ends: gdd %v … %v, power %v … %v", gdd.F64[0], gdd.F64[10], power.F64[0], power.F64[16])
	}
	cl, err := client.Dial(ctx, addr)
	if err != nil {
		t.Fatal(err)
	}
	defer cl.Close()
	n := 0
	for p, err := range cl.Points(ctx, id, 0) {
		if err != nil {
			t.Fatal(err)
		}
		if got := xx.F64[int(p.Index[0])*17+int(p.Index[1])]; got != float64(p.Counts[1]) {
			t.Errorf("point %d %v: counts_xx %v, stored %d", p.Seq, p.Index, got, p.Counts[1])
		}
		if p.Values[1] != power.F64[p.Index[1]] {
			t.Errorf("point %d: power %v, axis vector %v", p.Seq, p.Values[1], power.F64[p.Index[1]])
		}
		n++
	}
	if n != 187 {
		t.Errorf("%d points", n)
	}

	// A one-axis scan: a line plot of both channels.
	id2, stderr, err := cliRun(t, ctx, "scan", "power", "--server", addr, "--power-uw", "0.05:64:41", "--spacing", "amplitude", "--gdd-ps2", "0", "--gate-ms", "200", "--watch")
	if err != nil {
		t.Fatalf("scan power: %v\n%s", err, stderr)
	}
	linePNG := filepath.Join(dir, "rabi.png")
	if _, stderr, err := cliRun(t, ctx, "scan", "plot", strings.TrimSpace(id2), "-o", linePNG, "--channel", "all", "--server", addr); err != nil {
		t.Fatalf("scan plot (line): %v\n%s", err, stderr)
	}
	checkPNG(t, linePNG, 945, 709)
	keepPNG(t, linePNG)
	if _, _, err := cliRun(t, ctx, "scan", "plot", id, "-o", linePNG, "--channel", "all", "--server", addr); err == nil || ExitCode(err) != 2 {
		t.Errorf("heat map with --channel all: %v", err)
	}

	// A map with one GDD value is drawn as a line over power.
	id3, stderr, err := cliRun(t, ctx, "scan", "map", "--server", addr, "--gdd-ps2", "10", "--power-uw", "0.05:64:21", "--spacing", "amplitude", "--gate-ms", "100", "--watch")
	if err != nil {
		t.Fatalf("scan map (one GDD): %v\n%s", err, stderr)
	}
	sc3, err := cl.Get(ctx, strings.TrimSpace(id3))
	if err != nil {
		t.Fatal(err)
	}
	g3, err := client.NewGrid(sc3, cl.Points(ctx, sc3.Id, 0))
	if err != nil {
		t.Fatal(err)
	}
	fig, err := ScanFigure(sc3, g3, "all", 0)
	if err != nil || len(fig.Series) != 2 || len(fig.X) != 21 || fig.Options.XLabel != "power on the sample (µW)" || !strings.Contains(fig.Options.Title, "gdd_ps2 = 10") {
		t.Errorf("one-GDD map figure: %+v, %v", fig, err)
	}
}

func checkPNG(t *testing.T, path string, w, h int) {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img, err := png.Decode(f)
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	if s := img.Bounds().Size(); s.X != w || s.Y != h {
		t.Errorf("%s: %v, want %d × %d", path, s, w, h)
	}
}

func TestScanPlotAndExportHelp(t *testing.T) {
	for _, cmd := range []string{"plot", "export"} {
		_, stderr, err := cliRun(t, context.Background(), "scan", cmd, "--help")
		if ExitCode(err) != 0 || !strings.Contains(stderr, "Example:\n  gliss scan "+cmd) {
			t.Errorf("gliss scan %s --help: %v\n%s", cmd, err, stderr)
		}
	}
	_, _, err := cliRun(t, context.Background(), "scan", "plot", "ID")
	if err == nil || ExitCode(err) != 2 || !strings.Contains(err.Error(), "-o FILE.png") {
		t.Errorf("plot without -o: %v", err)
	}
	_, _, err = cliRun(t, context.Background(), "scan", "export", "ID", "--format", "npy", "-o", "-")
	if err == nil || ExitCode(err) != 2 || !strings.Contains(err.Error(), ".npz") {
		t.Errorf("npy to stdout: %v", err)
	}
}

func TestReorderConnectionFlags(t *testing.T) {
	got := strings.Join(reorder([]string{"ID", "--token-file", "tok", "--ca-cert", "ca.pem", "-o", "m.png", "--at", "2"}), " ")
	if want := "--token-file tok --ca-cert ca.pem -o m.png --at 2 ID"; got != want {
		t.Errorf("reorder: %q, want %q", got, want)
	}
}
