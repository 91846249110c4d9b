package cli

import (
	"math"
	"strconv"
	"strings"
	"testing"
)

// TestDetuningNM: a detuning axis in nm becomes per-photon detunings in meV.
// Check value: PHYSICS.md §6, ΔE ≈ hc·Δλ/λ²; 0.1 nm at 785 nm is ≈ 0.2012 meV
// (E = 1239841.98/λ meV), lower energy for a longer wavelength.
func TestDetuningNM(t *testing.T) {
	got, err := nmToMeV("-0.1:0.1:3", "785")
	if err != nil {
		t.Fatal(err)
	}
	parts := strings.Split(got, ",")
	if len(parts) != 3 {
		t.Fatalf("%q: %d values, want 3", got, len(parts))
	}
	want := []float64{0.2012, 0, -0.2012}
	for i, p := range parts {
		v, err := strconv.ParseFloat(p, 64)
		if err != nil || math.Abs(v-want[i]) > 2e-4 {
			t.Errorf("value %d: %q, want %.4f meV", i, p, want[i])
		}
	}
	if one, err := nmToMeV("0.05", "785"); err != nil || strings.Contains(one, ",") {
		t.Errorf("one value: %q, %v", one, err)
	}
	for _, bad := range [][2]string{{"x", "785"}, {"0:1:3", "nan"}, {"0:100:3", "785"}} {
		if _, err := nmToMeV(bad[0], bad[1]); err == nil || ExitCode(err) != 2 {
			t.Errorf("%v: error %v, want a usage error", bad, err)
		}
	}
}
