package cli

import (
	"encoding/json"
	"image"
	_ "image/png"
	"os"
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// TestModelPointPhonons: --temperature-k turns the phonon bath on (the demo
// dot's α and ħωc unless given); without it the result is the plain model's.
func TestModelPointPhonons(t *testing.T) {
	get := func(args ...string) map[string]float64 {
		t.Helper()
		out, errOut, code := runModelCLI(t, append([]string{"model", "point", "--gdd-ps2", "-20", "--area-pi", "10", "--json"}, args...)...)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errOut)
		}
		var m map[string]float64
		if err := json.Unmarshal([]byte(out), &m); err != nil {
			t.Fatal(err)
		}
		return m
	}
	p := model.DemoParams()
	p.XLifetimePS, p.XXLifetimePS = 0, 0
	p.GDDPS2, p.AreaPi = -20, 10
	plain, err := model.Solve(p)
	if err != nil {
		t.Fatal(err)
	}
	if got := get(); got["xx"] != plain.XX {
		t.Errorf("without --temperature-k: xx %v, plain model %v", got["xx"], plain.XX)
	}
	b := phonon.DemoBath()
	b.TemperatureK = 4.2
	want, err := phonon.Solve(p, &b)
	if err != nil {
		t.Fatal(err)
	}
	got := get("--temperature-k", "4.2")
	if got["xx"] != want.XX || got["n_xx"] != want.NXX {
		t.Errorf("at 4.2 K: xx %v n_xx %v, phonon model %v %v", got["xx"], got["n_xx"], want.XX, want.NXX)
	}
	// Fact of the trade (PHYSICS.md §7, common practice, no published source):
	// at a few kelvin the negative chirp loses the plateau at high power.
	if got["xx"] > plain.XX-0.3 {
		t.Errorf("at 4.2 K and −20 ps², 10π: xx %v, not clearly below the phonon-free %v", got["xx"], plain.XX)
	}
	b.AlphaPS2, b.CutoffMeV = 0.01, 2
	want, _ = phonon.Solve(p, &b)
	if got := get("--temperature-k", "4.2", "--phonon-alpha-ps2", "0.01", "--phonon-cutoff-mev", "2"); got["xx"] != want.XX {
		t.Errorf("custom bath: xx %v, phonon model %v", got["xx"], want.XX)
	}
	if _, _, code := runModelCLI(t, "model", "point", "--temperature-k", "-1"); code != 2 {
		t.Errorf("--temperature-k -1: exit %d, want 2", code)
	}
}

// TestModelMapPNG: --png draws the map as a PNG image of a sensible size.
func TestModelMapPNG(t *testing.T) {
	dir := t.TempDir()
	png := dir + "/map.png"
	_, errOut, code := runModelCLI(t, "model", "map", "--gdd-ps2", "-20:20:5", "--area-pi", "0:8:5", "-o", dir+"/map.csv", "--png", png)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	f, err := os.Open(png)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	cfg, format, err := image.DecodeConfig(f)
	if err != nil || format != "png" || cfg.Width < 200 || cfg.Height < 200 {
		t.Errorf("PNG: format %q, %dx%d, %v", format, cfg.Width, cfg.Height, err)
	}
}
