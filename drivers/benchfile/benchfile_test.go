package benchfile

import (
	"context"
	"errors"
	"log/slog"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile/yamlnode"
	"github.com/gliss-lab/gliss/drivers/lineproto"
	simbench "github.com/gliss-lab/gliss/sim/bench" // and its "sim" driver
)

func TestExampleParses(t *testing.T) {
	f, err := Parse("example.yaml", []byte(Example))
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Instruments) != 5 || f.Bench != "demo-sim" {
		t.Fatalf("example: %d instruments, bench %q", len(f.Instruments), f.Bench)
	}
	// Demo stretcher of PHYSICS.md: 0.04433 ps²/mm.
	k, err := f.Calibration.Stretcher.SlopePS2PerMM()
	if err != nil || k < 0.04428 || k > 0.04438 {
		t.Fatalf("example stretcher slope %v ps²/mm, %v; PHYSICS.md demo stretcher gives 0.04433", k, err)
	}
	st := f.Instruments[0]
	if st.Limits.StageMaxMM != 1200 || st.Limits.StageSpeedMMPerS != 25 {
		t.Fatalf("stage limits %+v", st.Limits)
	}
}

// realBlock uncomments the real-instrument entries of the example.
func realBlock(t *testing.T) string {
	i := strings.Index(Example, "# BEGIN REAL\n")
	j := strings.Index(Example, "# END REAL")
	if i < 0 || j < 0 {
		t.Fatal("example has no real-instrument block")
	}
	head := Example[:strings.Index(Example, "instruments:")]
	var b strings.Builder
	b.WriteString(head + "instruments:\n")
	for _, line := range strings.Split(Example[i+len("# BEGIN REAL\n"):j], "\n") {
		b.WriteString(strings.TrimPrefix(line, "#") + "\n")
	}
	return b.String()
}

func TestExampleRealInstrumentsParse(t *testing.T) {
	f, err := Parse("real.yaml", []byte(realBlock(t)))
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Instruments) != 3 {
		t.Fatalf("%d instruments", len(f.Instruments))
	}
	s := f.Instruments[0].Settings.(*lineproto.Settings)
	if s.Scale != 1000 || s.Transport.Baud != 115200 || s.Transport.WriteTerminator != "\r\n" {
		t.Fatalf("stage settings %+v", s)
	}
	pm := f.Instruments[1].Settings.(*lineproto.Settings)
	if pm.Identify != "*IDN?" || pm.ErrorQuery != "SYST:ERR?" {
		t.Fatalf("scpi defaults missing: identify %q, error query %q", pm.Identify, pm.ErrorQuery)
	}
}

const good = `bench: t
calibration:
  stretcher: {lines_per_mm: 1800, wavelength_nm: 785, littrow: true, passes: 4, lever: 2, zero_mm: 600}
  attenuator: {pmin_uw: 0.05, pmax_uw: 200, theta0_deg: 0}
instruments:
  - name: stage
    role: stage
    driver: lineproto
    limits: {min_mm: 0, max_mm: 1200, speed_mm_per_s: 25}
    settings:
      transport: {serial: /dev/null, baud: 9600}
      commands:
        move: 'MOVE {value:%.3f}'
        position: 'POS?'
`

// Each bad file must produce a message naming the file, the line and the key.
func TestErrorsNameFileLineAndKey(t *testing.T) {
	cases := []struct {
		name, text, want string
	}{
		{"unknown top key", good + "colour: blue\n", `bad.yaml:15: key colour: unknown key`},
		{"missing bench", strings.Replace(good, "bench: t\n", "", 1), `bad.yaml:1: key bench: missing (required)`},
		{"wrong type", strings.Replace(good, "max_mm: 1200", "max_mm: far", 1), `bad.yaml:9: key instruments[0].limits.max_mm: want a finite number, got "far"`},
		{"unknown limit", strings.Replace(good, "speed_mm_per_s: 25", "speed_mm_per_s: 25, jerk: 3", 1), `bad.yaml:9: key instruments[0].limits.jerk: unknown key`},
		{"missing limit", strings.Replace(good, ", speed_mm_per_s: 25", "", 1), `bad.yaml:9: key instruments[0].limits.speed_mm_per_s: missing (required)`},
		{"bad range", strings.Replace(good, "max_mm: 1200", "max_mm: -3", 1), `bad.yaml:9: key instruments[0].limits.max_mm: -3: must be above the minimum 0`},
		{"unknown role", strings.Replace(good, "role: stage", "role: mirror", 1), `bad.yaml:7: key instruments[0].role: "mirror": want one of stage, attenuator`},
		{"unknown driver", strings.Replace(good, "driver: lineproto", "driver: acme", 1), `bad.yaml:8: key instruments[0].driver: unknown driver "acme"`},
		{"missing name", strings.Replace(good, "  - name: stage\n    role", "  - role", 1), `bad.yaml:6: key instruments[0].name: missing (required)`},
		{"unknown setting", strings.Replace(good, "      commands:\n", "      speed: 3\n      commands:\n", 1), `bad.yaml:12: key instruments[0].settings.speed: unknown key`},
		{"bad baud", strings.Replace(good, "baud: 9600", "baud: 12", 1), `bad.yaml:11: key instruments[0].settings.transport: baud 12 outside [50, 4000000]`},
		{"two transports", strings.Replace(good, "baud: 9600", "tcp: 'host:5025'", 1), `bad.yaml:11: key instruments[0].settings.transport: name exactly one of serial, tcp and replay`},
		{"missing command", strings.Replace(good, "        position: 'POS?'\n", "", 1), `bad.yaml:13: key instruments[0].settings.commands.position: missing (required for role stage)`},
		{"unknown command", strings.Replace(good, "position: 'POS?'", "position: 'POS?'\n        jog: 'J'", 1), `bad.yaml:15: key instruments[0].settings.commands.jog: unknown command`},
		{"bad placeholder", strings.Replace(good, "{value:%.3f}", "{mm:%.3f}", 1), `bad.yaml:13: key instruments[0].settings.commands.move: template "MOVE {mm:%.3f}": unknown placeholder {mm}`},
		{"bad verb", strings.Replace(good, "{value:%.3f}", "{value:%s}", 1), `bad.yaml:13: key instruments[0].settings.commands.move: template "MOVE {value:%s}"`},
		{"bad pattern", strings.Replace(good, "position: 'POS?'", "position: {send: 'POS?', pattern: '(?P<value>'}", 1), `bad.yaml:14: key instruments[0].settings.commands.position.pattern: pattern "(?P<value>"`},
		{"pattern without group", strings.Replace(good, "position: 'POS?'", "position: {send: 'POS?', pattern: '^POS'}", 1), `bad.yaml:14: key instruments[0].settings.commands.position.pattern: pattern "^POS" has no group`},
		{"duration type", strings.Replace(good, "baud: 9600", "baud: 9600, timeout: 5", 1), `bad.yaml:11: key instruments[0].settings.transport.timeout: want a duration`},
		{"duplicate name", good + strings.SplitN(good, "instruments:\n", 2)[1], `bad.yaml:15: key instruments[1].name: "stage" is already the name of the instrument at line 6`},
		{"no stretcher", strings.Replace(good, "  stretcher: {lines_per_mm: 1800, wavelength_nm: 785, littrow: true, passes: 4, lever: 2, zero_mm: 600}\n", "", 1), `bad.yaml:1: key calibration.stretcher: missing`},
		{"stretcher geometry", strings.Replace(good, "lines_per_mm: 1800", "lines_per_mm: 3000", 1), `bad.yaml:3: key calibration.stretcher: stretcher: no Littrow angle`},
		{"malus order", strings.Replace(good, "pmax_uw: 200", "pmax_uw: 0.01", 1), `bad.yaml:4: key calibration.attenuator.pmax_uw: 0.01: want pmax_uw > pmin_uw (0.05)`},
		{"sim takes its own keys", strings.Replace(good, "driver: lineproto", "driver: sim", 1), `bad.yaml:11: key instruments[0].settings.transport: unknown key`},
		{"counter channels", strings.Replace(strings.Replace(good, "role: stage", "role: counter", 1), "    limits: {min_mm: 0, max_mm: 1200, speed_mm_per_s: 25}\n", "", 1), `key instruments[0].settings.commands.count: missing (required for role counter)`},
		{"thermometer time constant", strings.Replace(strings.Replace(good, "role: stage", "role: thermometer", 1), "limits: {min_mm: 0, max_mm: 1200, speed_mm_per_s: 25}", "limits: {min_k: 1.5, max_k: 300, time_constant_s: -5}", 1), `key instruments[0].limits.time_constant_s: -5: must be ≥ 0`},
		{"yaml syntax", good + "  - name: [\n", `bad.yaml: yaml: line`},
		{"alias", strings.Replace(good, "bench: t", "bench: &a t", 1) + "x: *a\n", `key x:`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse("bad.yaml", []byte(c.text))
			if err == nil {
				t.Fatalf("no error; want %q", c.want)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error\n  %v\nwant it to contain\n  %s", err, c.want)
			}
		})
	}
}

func TestLoadOpensAndRecords(t *testing.T) {
	dir := t.TempDir()
	// A replay recording as the device: the bench opens without hardware.
	rec := `{"time":"2026-01-01T00:00:00Z","instrument":"meter","sent":"PWR?","received":"PWR 1.5E-2 mW","latency_ms":1}` + "\n"
	os.WriteFile(filepath.Join(dir, "traffic.jsonl"), []byte(rec), 0o644)
	text := `bench: replayed
instruments:
  - name: meter
    role: powermeter
    driver: lineproto
    settings:
      transport: {replay: traffic.jsonl}
      commands:
        read: {send: 'PWR?', pattern: '^PWR (?P<value>\S+) (?P<unit>\S+)$', unit: uW}
`
	path := filepath.Join(dir, "bench.yaml")
	os.WriteFile(path, []byte(text), 0o644)
	recDir := filepath.Join(dir, "rec")
	b, err := Load(context.Background(), path, Options{RecordDir: recDir})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	p, err := b.PowerMeter().PowerUW(context.Background())
	// 1.5E-2 mW = 15 µW (SI prefixes).
	if err != nil || p != 15 {
		t.Fatalf("power = %v, %v; want 15 µW", p, err)
	}
	_, err = b.PowerMeter().PowerUW(context.Background())
	if !errors.Is(err, drivers.ErrUnavailable) {
		t.Fatalf("past the recording: %v; want ErrUnavailable", err)
	}
	files, _ := filepath.Glob(filepath.Join(recDir, "transactions-*.jsonl"))
	if len(files) != 1 {
		t.Fatalf("recording files: %v", files)
	}
	data, _ := os.ReadFile(files[0])
	if !regexp.MustCompile(`"instrument":"meter","sent":"PWR\?","received":"PWR 1.5E-2 mW","latency_ms":[0-9.e-]+}`).Match(data) {
		t.Fatalf("recording does not hold the transaction:\n%s", data)
	}
}

func FuzzParse(f *testing.F) {
	f.Add([]byte(good))
	f.Add([]byte(Example))
	f.Add([]byte("bench: x\ninstruments: []\n"))
	f.Add([]byte("bench: [\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		file, err := Parse("fuzz.yaml", data)
		if err != nil {
			var ye *yamlnode.Error
			if errors.As(err, &ye) && (ye.File != "fuzz.yaml" || ye.Line < 0) {
				t.Fatalf("error without file and line: %v", err)
			}
			if !strings.HasPrefix(err.Error(), "fuzz.yaml") {
				t.Fatalf("error does not start with the file name: %v", err)
			}
			return
		}
		for _, in := range file.Instruments {
			if in.Name == "" || in.Driver == "" {
				t.Fatalf("accepted an instrument without name or driver: %+v", in)
			}
		}
	})
}

// The example's sim entries make the same bench as sim/bench.New: same
// seed, same command sequence, same counts.
func TestExampleIsTheBuiltInSimBench(t *testing.T) {
	text := strings.ReplaceAll(Example, "{bench: demo, seed: 1}", "{bench: example-test, seed: 1, instant: true}")
	path := filepath.Join(t.TempDir(), "sim.yaml")
	os.WriteFile(path, []byte(text), 0o644)
	ctx := context.Background()
	fromFile, err := Load(ctx, path, Options{Logger: slog.New(slog.DiscardHandler)})
	if err != nil {
		t.Fatal(err)
	}
	defer fromFile.Close()
	builtIn, err := simbench.New(simbench.Options{Seed: 1, Instant: true})
	if err != nil {
		t.Fatal(err)
	}
	defer builtIn.Close()
	var got [2][]uint64
	for i, b := range []*drivers.Bench{fromFile, builtIn} {
		if err := b.Stage().MoveToMM(ctx, 620); err != nil {
			t.Fatal(err)
		}
		if err := b.Attenuator().SetAngleDeg(ctx, 20); err != nil {
			t.Fatal(err)
		}
		c, err := b.Counter().Count(ctx, 50*time.Millisecond)
		if err != nil {
			t.Fatal(err)
		}
		got[i] = c
	}
	if got[0][0] != got[1][0] || got[0][1] != got[1][1] || got[0][0] == 0 {
		t.Fatalf("counts from the example bench file %v, from sim/bench.New %v", got[0], got[1])
	}
}
