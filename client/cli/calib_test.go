package cli

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"math"
	"strings"
	"testing"
)

func runCalib(t *testing.T, stdin string, args ...string) (string, string, error) {
	t.Helper()
	var out, errb bytes.Buffer
	env := &Env{Stdout: &out, Stderr: &errb, Stdin: strings.NewReader(stdin), Getenv: func(string) string { return "" }}
	err := Run(context.Background(), env, append([]string{"calib"}, args...))
	return out.String(), errb.String(), err
}

func TestCalibStretcherCheckValue(t *testing.T) {
	// PHYSICS.md §4 check (Treacy 1969; Martinez 1987): 1800 lines/mm, 780 nm,
	// Littrow, N = 2, k = 2, 875 mm → 18.8 ps² (±0.1).
	out, _, err := runCalib(t, "", "stretcher", "--lines-per-mm", "1800", "--wavelength-nm", "780", "--passes", "2", "--lever", "2", "--travel-mm", "875", "--json")
	if err != nil {
		t.Fatal(err)
	}
	var r struct {
		GDD   float64 `json:"gdd_ps2"`
		Slope float64 `json:"slope_ps2_per_mm"`
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatalf("%v:\n%s", err, out)
	}
	if math.Abs(r.GDD-18.8) > 0.1 || math.Abs(r.Slope*875-r.GDD) > 1e-9 {
		t.Errorf("GDD %g ps², slope %g: want 18.8 ± 0.1", r.GDD, r.Slope)
	}
	// PHYSICS.md demo stretcher (invented): 785 nm, N = 4 → 0.04433 ps²/mm.
	out, _, err = runCalib(t, "", "stretcher", "--lines-per-mm", "1800", "--wavelength-nm", "785", "--passes", "4", "--lever", "2", "--travel-mm", "600")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out, "slope 0.0443") || !strings.Contains(out, "GDD 26.6 ps²") {
		t.Errorf("demo stretcher:\n%s", out)
	}
}

func TestCalibEnergy(t *testing.T) {
	// PHYSICS.md §6: 1.9 nm at 780, 790, 800 nm → 3.87, 3.77, 3.68 meV (±0.01).
	for _, c := range []struct {
		at   string
		want float64
	}{{"780", 3.87}, {"790", 3.77}, {"800", 3.68}} {
		out, _, err := runCalib(t, "", "energy", "--nm", "1.9", "--at-nm", c.at, "--json")
		if err != nil {
			t.Fatal(err)
		}
		var r struct{ MeV, NM float64 }
		if err := json.Unmarshal([]byte(out), &r); err != nil {
			t.Fatal(err)
		}
		if math.Abs(r.MeV-c.want) > 0.01 {
			t.Errorf("1.9 nm at %s nm: %g meV, want %g", c.at, r.MeV, c.want)
		}
		// And back.
		out, _, err = runCalib(t, "", "energy", "--mev", fmt.Sprint(r.MeV), "--at-nm", c.at, "--json")
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal([]byte(out), &r); err != nil || math.Abs(r.NM-1.9) > 1e-9 {
			t.Errorf("back to nm: %g (%v)", r.NM, err)
		}
	}
	out, _, err := runCalib(t, "", "energy", "--nm", "1.9", "--at-nm", "785")
	if err != nil || !strings.Contains(out, "3.82") {
		t.Errorf("text output %q (%v), want 3.82 meV", out, err)
	}
}

func TestCalibBadInput(t *testing.T) {
	base := []string{"stretcher", "--lines-per-mm", "1800", "--wavelength-nm", "780", "--passes", "2", "--lever", "2", "--travel-mm", "875"}
	with := func(flagName, v string) []string {
		out := append([]string(nil), base...)
		for i := range out {
			if out[i] == flagName {
				out[i+1] = v
			}
		}
		return out
	}
	cases := []struct {
		args []string
		want string // the flag named in the one-line message
	}{
		{with("--lines-per-mm", "0"), "--lines-per-mm 0"},
		{with("--wavelength-nm", "1e6"), "--wavelength-nm 1e+06"},
		{with("--passes", "0"), "--passes 0"},
		{with("--lever", "-1"), "--lever -1"},
		{with("--travel-mm", "NaN"), "--travel-mm NaN"},
		{with("--wavelength-nm", "1200"), "--wavelength-nm 1200"}, // no Littrow angle at 1800 lines/mm
		{append(with("--passes", "2"), "--incidence-deg", "95"), "--incidence-deg 95"},
		{[]string{"stretcher", "--lines-per-mm", "1800"}, "--wavelength-nm is required"},
		{[]string{"energy", "--nm", "1.9"}, "--at-nm is required"},
		{[]string{"energy", "--nm", "1.9", "--mev", "3", "--at-nm", "780"}, "exactly one of --nm and --mev"},
		{[]string{"energy", "--nm", "1.9", "--at-nm", "50"}, "--at-nm 50"},
		{[]string{"attenuator", "--readings", "-", "--law", "prism"}, "--law \"prism\""},
		{[]string{"stretcher", "--bogus"}, "bogus"},
	}
	for _, c := range cases {
		_, _, err := runCalib(t, "", c.args...)
		if ExitCode(err) != 2 {
			t.Errorf("%v: exit %d (%v), want 2", c.args, ExitCode(err), err)
			continue
		}
		if msg := err.Error(); !strings.Contains(msg, c.want) || strings.Contains(msg, "\n") {
			t.Errorf("%v: message %q, want one line naming %q", c.args, msg, c.want)
		}
	}
}

func TestCalibHelpHasExample(t *testing.T) {
	for _, name := range []string{"stretcher", "energy", "attenuator", "stretcher-fit"} {
		_, stderr, err := runCalib(t, "", name, "--help")
		if !errors.Is(err, flag.ErrHelp) || ExitCode(err) != 0 {
			t.Errorf("%s --help: %v", name, err)
		}
		if !strings.Contains(stderr, "Example:\n  gliss calib "+name) {
			t.Errorf("%s --help lacks an example:\n%s", name, stderr)
		}
	}
}

func TestCalibAttenuatorFit(t *testing.T) {
	// Readings of an exact Malus law: the fit returns it.
	var b strings.Builder
	b.WriteString("# power sweep\nangle_deg,power_uw\n")
	for th := 0.0; th <= 90; th += 5 {
		c := math.Cos(2 * (th - 4) * math.Pi / 180)
		fmt.Fprintf(&b, "%g, %.12g\n", th, 0.1+(150-0.1)*c*c)
	}
	out, _, err := runCalib(t, b.String(), "attenuator", "--readings", "-", "--json")
	if err != nil {
		t.Fatal(err)
	}
	var r struct {
		Fit struct {
			PMax  float64 `json:"p_max_uw"`
			Theta float64 `json:"theta0_deg"`
		}
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil || math.Abs(r.Fit.PMax-150) > 1e-6 || math.Abs(r.Fit.Theta-4) > 1e-6 {
		t.Errorf("fit %+v (%v):\n%s", r, err, out)
	}
	// ND wheel, text output.
	b.Reset()
	b.WriteString("angle_deg,power_uw\n")
	for th := 0.0; th <= 270; th += 30 {
		fmt.Fprintf(&b, "%g,%.12g\n", th, 200*math.Pow(10, -th/100))
	}
	out, _, err = runCalib(t, b.String(), "attenuator", "--readings", "-", "--law", "nd")
	if err != nil || !strings.Contains(out, "P0 200 ") || !strings.Contains(out, "k  0.01 ") {
		t.Errorf("nd wheel (%v):\n%s", err, out)
	}
	// A bad line is a usage error naming the line.
	_, _, err = runCalib(t, "angle_deg,power_uw\n0,1\n5,abc\n", "attenuator", "--readings", "-")
	if ExitCode(err) != 2 || !strings.Contains(err.Error(), "line 3") {
		t.Errorf("bad reading: %v", err)
	}
}

func TestCalibStretcherFit(t *testing.T) {
	var b strings.Builder
	b.WriteString("stage_mm,fwhm_ps\n")
	for x := 500.0; x <= 700; x += 10 {
		g := 0.04433 * (x - 600)
		t0 := 2.4 / (2 * math.Sqrt(math.Ln2))
		fmt.Fprintf(&b, "%g,%.12g\n", x, 2*math.Sqrt(math.Ln2)*math.Sqrt(t0*t0+g*g/(t0*t0)))
	}
	out, _, err := runCalib(t, b.String(), "stretcher-fit", "--readings", "-", "--json")
	if err != nil {
		t.Fatal(err)
	}
	var r struct {
		K  float64 `json:"slope_ps2_per_mm"`
		X0 float64 `json:"zero_mm"`
		TL float64 `json:"tl_fwhm_ps"`
	}
	if err := json.Unmarshal([]byte(out), &r); err != nil || math.Abs(r.K-0.04433) > 1e-9 || math.Abs(r.X0-600) > 1e-6 || math.Abs(r.TL-2.4) > 1e-9 {
		t.Errorf("fit %+v (%v)", r, err)
	}
}

func FuzzParseReadingsCSV(f *testing.F) {
	f.Add("angle_deg,power_uw\n0,1\n5,2\n")
	f.Add("# c\nangle_deg, power_uw\n 0 , 1e3\n")
	f.Add("angle_deg,power_uw\n0,NaN\n")
	f.Add("\"angle_deg\",\"power_uw\"\n\"1\",\"2\"")
	f.Fuzz(func(t *testing.T, in string) {
		a, b, err := parseReadingsCSV(strings.NewReader(in), "angle_deg", "power_uw")
		if err != nil {
			return
		}
		if len(a) != len(b) {
			t.Fatalf("%d angles, %d powers", len(a), len(b))
		}
		for i := range a {
			if math.IsNaN(a[i]) || math.IsInf(a[i], 0) || math.IsNaN(b[i]) || math.IsInf(b[i], 0) {
				t.Fatalf("non-finite reading %d: %g, %g", i, a[i], b[i])
			}
		}
	})
}
