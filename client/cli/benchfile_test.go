package cli

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func runCLI(t *testing.T, ctx context.Context, args ...string) (stdout, stderr string, code int) {
	t.Helper()
	var o, e bytes.Buffer
	err := Run(ctx, &Env{Stdout: &o, Stderr: &e, Getenv: func(string) string { return "" }}, args)
	if err != nil {
		e.WriteString(err.Error())
	}
	return o.String(), e.String(), ExitCode(err)
}

func TestBenchExampleCheckAndProbe(t *testing.T) {
	ctx := context.Background()
	out, _, code := runCLI(t, ctx, "bench", "example")
	if code != 0 || !strings.Contains(out, "bench: demo-sim") {
		t.Fatalf("bench example: code %d\n%s", code, out)
	}
	path := filepath.Join(t.TempDir(), "lab.yaml")
	os.WriteFile(path, []byte(out), 0o644)
	out, errs, code := runCLI(t, ctx, "bench", "check", path)
	if code != 0 || !strings.Contains(out, "5 instruments, file valid") || !strings.Contains(out, "0–1200 mm, 25 mm/s") {
		t.Fatalf("bench check: code %d\n%s%s", code, out, errs)
	}
	out, errs, code = runCLI(t, ctx, "bench", "check", "--probe", path)
	if code != 0 {
		t.Fatalf("bench check --probe: code %d\n%s%s", code, out, errs)
	}
	// The simulated stage powers on at 600 mm (zero dispersion of the demo stretcher).
	for _, want := range []string{"IDENTITY", "at 600.0000 mm", "x ", "in a 100ms gate"} {
		if !strings.Contains(out, want) {
			t.Errorf("probe table lacks %q:\n%s", want, out)
		}
	}
}

func TestBenchCheckBadFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "bad.yaml")
	os.WriteFile(path, []byte("bench: b\ninstruments:\n  - name: s\n    role: stage\n    driver: sim\n    limits: {min_mm: 0, max_mm: 10, speed_mm_per_s: 1, wobble: 2}\n"), 0o644)
	_, errs, code := runCLI(t, context.Background(), "bench", "check", path)
	if code != 2 || !strings.Contains(errs, path+":6: key instruments[0].limits.wobble: unknown key") {
		t.Fatalf("code %d, stderr:\n%s", code, errs)
	}
	_, errs, code = runCLI(t, context.Background(), "bench", "check")
	if code != 2 || !strings.Contains(errs, "FILE missing") {
		t.Fatalf("no file: code %d, %s", code, errs)
	}
}

func TestBenchProbeReportsAbsentInstrument(t *testing.T) {
	path := filepath.Join(t.TempDir(), "absent.yaml")
	os.WriteFile(path, []byte(`bench: b
instruments:
  - name: meter
    role: powermeter
    driver: lineproto
    settings:
      transport: {serial: /dev/serial/by-id/usb-absent-meter-if00, baud: 9600}
      retries: 0
      identify: 'ID?'
      commands: {read: 'PWR?'}
`), 0o644)
	out, errs, code := runCLI(t, context.Background(), "bench", "check", path, "--probe")
	if code != 1 || !strings.Contains(out, "FAILED:") || !strings.Contains(out, "usb-absent-meter-if00") || !strings.Contains(errs, "1 of 1 instruments failed") {
		t.Fatalf("code %d\n%s%s", code, out, errs)
	}
}
