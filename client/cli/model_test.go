package cli

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/gliss-lab/gliss/sim/model"
)

func runModelCLI(t *testing.T, args ...string) (stdout, stderr string, code int) {
	t.Helper()
	var o, e bytes.Buffer
	err := Run(context.Background(), &Env{Stdout: &o, Stderr: &e, Getenv: func(string) string { return "" }}, args)
	if err != nil && ExitCode(err) != 0 {
		e.WriteString(err.Error() + "\n")
	}
	return o.String(), e.String(), ExitCode(err)
}

func TestModelPointJSON(t *testing.T) {
	out, errOut, code := runModelCLI(t, "model", "point", "--fwhm-ps", "2.4", "--gdd-ps2", "20", "--area-pi", "8",
		"--binding-mev", "4.1", "--detuning-mev", "0", "--x-lifetime-ps", "270", "--xx-lifetime-ps", "130", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	var got map[string]float64
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("output %q: %v", out, err)
	}
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = 20, 8
	want, err := model.Solve(p)
	if err != nil {
		t.Fatal(err)
	}
	for k, w := range map[string]float64{"g": want.G, "x": want.X, "xx": want.XX, "n_x": want.NX, "n_xx": want.NXX} {
		if g, ok := got[k]; !ok || g != w {
			t.Errorf("%s = %v (present %v), want %v", k, g, ok, w)
		}
	}
	if len(got) != 5 {
		t.Errorf("keys %v, want exactly g, x, xx, n_x, n_xx", got)
	}
}

// TestModelPointDefaults: no flags is the demo dot without decay.
func TestModelPointDefaults(t *testing.T) {
	out, errOut, code := runModelCLI(t, "model", "point", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	var got struct{ XX, NXX float64 }
	if err := json.Unmarshal([]byte(strings.ReplaceAll(out, "n_xx", "nxx")), &got); err != nil {
		t.Fatal(err)
	}
	p := model.DemoParams()
	p.XLifetimePS, p.XXLifetimePS = 0, 0
	want, _ := model.Solve(p)
	if got.XX != want.XX || got.NXX != want.XX {
		t.Errorf("defaults: xx %v n_xx %v, want %v (demo dot, no decay: n_xx = xx)", got.XX, got.NXX, want.XX)
	}
	_, help, code := runModelCLI(t, "model", "point", "--help")
	if code != 0 || !strings.Contains(help, "(default 2.4)") || !strings.Contains(help, "(default 4.1)") || !strings.Contains(help, "270") {
		t.Errorf("--help (exit %d) does not show the demo dot:\n%s", code, help)
	}
}

func TestModelBadInput(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"point", "--fwhm-ps", "0"}, "fwhm-ps"},
		{[]string{"point", "--fwhm-ps", "NaN"}, "fwhm-ps"},
		{[]string{"point", "--gdd-ps2", "Inf"}, "gdd-ps2"},
		{[]string{"point", "--x-lifetime-ps", "-3"}, "x-lifetime-ps"},
		{[]string{"point", "--xx-lifetime-ps", "-1e-9"}, "xx-lifetime-ps"},
		{[]string{"point", "--xx-lifetime-ps", "0.5"}, "xx-lifetime-ps"},
		{[]string{"point", "--fwhm-ps", "0.1"}, "fwhm-ps"},
		{[]string{"point", "--area-pi", "abc"}, "area-pi"},
		{[]string{"point", "--tolerance", "1"}, "tolerance"},
		{[]string{"map", "--gdd-ps2", "0:1:0", "--area-pi", "1"}, "gdd-ps2"},
		{[]string{"map", "--gdd-ps2", "0:1:100001", "--area-pi", "1"}, "gdd-ps2"},
		{[]string{"map", "--gdd-ps2", "0:1", "--area-pi", "1"}, "gdd-ps2"},
		{[]string{"map", "--gdd-ps2", "-5:5:3", "--area-pi", "0:NaN:3"}, "area-pi"},
		{[]string{"map", "--gdd-ps2", "-5:5:3", "--area-pi", "-1:3:3"}, "area-pi"},
		{[]string{"map", "--gdd-ps2", "-200:5:3", "--area-pi", "1:3:3"}, "gdd-ps2"},
		{[]string{"map", "--gdd-ps2", "-5:5:3", "--detuning-mev", "0:30:3"}, "detuning-mev"},
		{[]string{"map", "--gdd-ps2", "-5:5:3", "--area-pi", "1:2:2", "--detuning-mev", "0:1:2"}, "both ranges"},
		{[]string{"map", "--gdd-ps2", "-5:5:3000", "--area-pi", "1:2:3000"}, "at most"},
		{[]string{"map", "--area-pi", "1:2:2"}, "gdd-ps2"},
		{[]string{"map", "--gdd-ps2", "1:2:2", "--fwhm-ps", "-1"}, "fwhm-ps"},
	} {
		out, errOut, code := runModelCLI(t, append([]string{"model"}, c.args...)...)
		lines := strings.Split(strings.TrimSpace(errOut), "\n")
		if code != 2 || out != "" || len(lines) != 1 || !strings.Contains(errOut, c.want) || !strings.Contains(errOut, "allowed") && !strings.Contains(errOut, "give") && !strings.Contains(errOut, "required") {
			t.Errorf("%v: exit %d, stdout %q, stderr %q; want status 2 and one line naming %q and what is allowed", c.args, code, out, errOut, c.want)
		}
	}
}

func TestModelMapCSV(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "map.csv")
	_, errOut, code := runModelCLI(t, "model", "map", "--gdd-ps2", "-10:10:3", "--area-pi", "1:5:4",
		"--x-lifetime-ps", "270", "--xx-lifetime-ps", "130", "-o", path)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	rows := readModelCSV(t, path)
	if strings.Join(rows[0], ",") != "gdd_ps2,area_pi,g,x,xx,n_x,n_xx" || len(rows) != 1+3*4 {
		t.Fatalf("header %v, %d rows; want gdd_ps2,area_pi,g,x,xx,n_x,n_xx and 12 points", rows[0], len(rows)-1)
	}
	// row 6 is GDD 0, area 1 + 1·(4/3)
	p := model.DemoParams()
	p.GDDPS2, p.AreaPi = 0, 1+4.0/3
	want, _ := model.Solve(p)
	r := modelFloats(t, rows[6])
	// a map point agrees with a single solve to the solver's accuracy
	if r[0] != 0 || math.Abs(r[1]-p.AreaPi) > 1e-12 || math.Abs(r[4]-want.XX) > 1e-6 || math.Abs(r[6]-want.NXX) > 1e-6 {
		t.Errorf("row %v, want GDD 0, area %g, xx %g, n_xx %g", rows[6], p.AreaPi, want.XX, want.NXX)
	}
	if entries, _ := os.ReadDir(dir); len(entries) != 1 {
		t.Errorf("temporary files left in %s: %v", dir, entries)
	}
}

func TestModelMapDetuning(t *testing.T) {
	out, errOut, code := runModelCLI(t, "model", "map", "--gdd-ps2", "5", "--detuning-mev", "-0.5:0.5:3", "--area-pi", "6")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errOut)
	}
	rows, err := csv.NewReader(strings.NewReader(out)).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(rows[0], ",") != "gdd_ps2,detuning_mev,g,x,xx,n_x,n_xx" || len(rows) != 4 {
		t.Fatalf("rows %v", rows)
	}
	p := model.DemoParams()
	p.XLifetimePS, p.XXLifetimePS = 0, 0
	p.GDDPS2, p.AreaPi, p.DetuningMeV = 5, 6, 0.5
	want, _ := model.Solve(p)
	if r := modelFloats(t, rows[3]); r[1] != 0.5 || r[4] != want.XX {
		t.Errorf("last row %v, want detuning 0.5 and xx %v", rows[3], want.XX)
	}
}

func readModelCSV(t *testing.T, path string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	return rows
}

func modelFloats(t *testing.T, row []string) []float64 {
	t.Helper()
	out := make([]float64, len(row))
	for i, s := range row {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			t.Fatalf("row %v: %v", row, err)
		}
		out[i] = v
	}
	return out
}
