package lineproto

import (
	"errors"
	"math"
	"strings"
	"testing"
)

func TestParseNumber(t *testing.T) {
	cases := []struct {
		reply, pattern, unit string
		want                 float64
		bad                  bool
	}{
		{"600.000", "", "", 600, false},
		{"  -12.5e-1 ", "", "", -1.25, false},
		{"12.5 uW", "", "uW", 12.5, false},
		{"1.234E-05", "", "W→uW", 12.34, false},
		// SI prefixes (BIPM, The International System of Units, 9th ed., 2019, §3):
		// 1 mW = 10³ µW, 1 W = 10⁶ µW, 1 nW = 10⁻³ µW.
		{"1.5E-2 mW", "", "uW", 15, false},
		{"2.5E-5 W", "", "uW", 25, false},
		{"750 nW", "", "uW", 0.75, false},
		{"4.2 K", "", "K", 4.2, false},
		{"3 mK", "", "K", 0.003, false},
		{"POS 12.000", `^POS (?P<value>\S+)$`, "", 12, false},
		{"P=3.0;U=mW", `^P=(?P<value>[^;]+);U=(?P<unit>\w+)$`, "uW", 3000, false},
		{"", "", "", 0, true},
		{"NaN", "", "", 0, true},
		{"Inf", "", "", 0, true},
		{"0x10", "", "", 0, true},
		{"1_000", "", "", 0, true},
		{"12.5 furlongs", "", "uW", 0, true},
		{"12.5 uW", "", "", 0, true}, // a unit where none is expected
		{"12.5 mm", "", "uW", 0, true},
		{"POS 1~2.000", `^POS (?P<value>\S+)$`, "", 0, true},
		{"ANG 12", `^POS (?P<value>\S+)$`, "", 0, true},
		{"ERR 3", "", "", 0, true},
		{"1e999", "", "", 0, true},
	}
	for _, c := range cases {
		var p *Pattern
		if c.pattern != "" {
			p = MustPattern(c.pattern)
		}
		assumed, want, _ := strings.Cut(c.unit, "→")
		if want == "" {
			want, assumed = assumed, ""
		}
		got, err := ParseNumber(c.reply, p, assumed, want)
		if c.bad {
			if err == nil || !errors.Is(err, ErrBadReply) {
				t.Errorf("ParseNumber(%q, %q) = %v, %v; want ErrBadReply", c.reply, c.unit, got, err)
			}
			continue
		}
		if err != nil || got != c.want {
			t.Errorf("ParseNumber(%q, %q) = %v, %v; want %v", c.reply, c.unit, got, err, c.want)
		}
	}
}

func TestParseCountsAndState(t *testing.T) {
	ch := []string{"x", "xx"}
	if got, err := ParseCounts("1234 567", nil, ch); err != nil || got[0] != 1234 || got[1] != 567 {
		t.Fatalf("%v %v", got, err)
	}
	if got, err := ParseCounts("CNT 5,6", MustPattern(`^CNT (?P<xx>\d+),(?P<x>\d+)$`), ch); err != nil || got[0] != 6 || got[1] != 5 {
		t.Fatalf("named groups: %v %v; want x=6 xx=5", got, err)
	}
	for _, bad := range []string{"", "12", "1 2 3", "-1 2", "1.5 2", "a b", "18446744073709551616 1"} {
		if got, err := ParseCounts(bad, nil, ch); !errors.Is(err, ErrBadReply) {
			t.Errorf("ParseCounts(%q) = %v, %v; want ErrBadReply", bad, got, err)
		}
	}
	busy, ready := MustPattern(`^BUSY 1$`), MustPattern(`^BUSY 0$`)
	if b, err := ParseState("BUSY 1", busy, ready); err != nil || !b {
		t.Fatal(b, err)
	}
	if b, err := ParseState("BUSY 0", busy, ready); err != nil || b {
		t.Fatal(b, err)
	}
	if _, err := ParseState("BUSY ~", busy, ready); !errors.Is(err, ErrBadReply) {
		t.Fatalf("garbled state: %v", err)
	}
}

func TestTemplates(t *testing.T) {
	cases := []struct {
		src  string
		v    Vars
		want string
	}{
		{"MOVE {value:%.3f}", Vars{Value: 600}, "MOVE 600.000"},
		{"{axis}PA{value:%.0f}", Vars{Value: 12000.4, Axis: "2"}, "2PA12000"},
		{"ACQ {gate_ms:%d}", Vars{GateMS: 99.6}, "ACQ 100"},
		{"ACQ {gate_s:%g}", Vars{GateMS: 250}, "ACQ 0.25"},
		{"SET {{raw}} {value}", Vars{Value: -1.5}, "SET {raw} -1.5"},
		{"*OPC?", Vars{}, "*OPC?"},
		{"X{value:%+08.2f}", Vars{Value: 3.14159}, "X+0003.14"},
		{"N {value:%d}", Vars{Value: -2.5}, "N -3"},
	}
	for _, c := range cases {
		tp, err := ParseTemplate(c.src, "value", "axis", "gate_ms", "gate_s")
		if err != nil {
			t.Fatalf("%q: %v", c.src, err)
		}
		got, err := tp.Render(c.v)
		if err != nil || got != c.want {
			t.Errorf("%q → %q, %v; want %q", c.src, got, err, c.want)
		}
	}
	for _, bad := range []string{"", "MOVE {value", "MOVE }", "MOVE {speed}", "MOVE {value:%s}", "MOVE {value:%.999f}", "MOVE {value:%x}", "{axis:%d}", "MOVE {value:%%}"} {
		if _, err := ParseTemplate(bad, "value", "axis"); err == nil {
			t.Errorf("ParseTemplate(%q) accepted", bad)
		}
	}
	if _, err := ParseTemplate("GATE {gate_ms}", "value"); err == nil {
		t.Error("a placeholder the command does not allow was accepted")
	}
	tp, _ := ParseTemplate("MOVE {value:%.3f}", "value")
	for _, v := range []float64{math.NaN(), math.Inf(1)} {
		if s, err := tp.Render(Vars{Value: v}); err == nil {
			t.Errorf("rendered %v as %q", v, s)
		}
	}
	ax, _ := ParseTemplate("{axis}POS?", "axis")
	if s, err := ax.Render(Vars{Axis: "1\n2"}); err == nil {
		t.Errorf("rendered a line break: %q", s)
	}
}

func TestMotionTime(t *testing.T) {
	// Trapezoid, demo stage of PHYSICS.md (25 mm/s, 50 mm/s²): 100 mm takes
	// 100/25 + 25/50 = 4.5 s; 4 mm never reaches full speed: 2·sqrt(4/50) = 0.566 s.
	if got := MotionTime(100, 25, 50).Seconds(); math.Abs(got-4.5) > 1e-9 {
		t.Fatalf("100 mm: %v s", got)
	}
	if got := MotionTime(-4, 25, 50).Seconds(); math.Abs(got-2*math.Sqrt(0.08)) > 1e-9 {
		t.Fatalf("4 mm: %v s", got)
	}
	if got := MotionTime(10, 0, 50); got != 0 {
		t.Fatalf("unknown speed: %v", got)
	}
}

func FuzzParseNumber(f *testing.F) {
	for _, s := range []string{"600.000", "1.5E-2 mW", "POS 1", "NaN", "-0", ".5", "1e400", "12.5 µW"} {
		f.Add(s, "uW")
	}
	pat := MustPattern(`^(?:POS )?(?P<value>\S+)(?: (?P<unit>\S+))?$`)
	f.Fuzz(func(t *testing.T, reply, unit string) {
		for _, p := range []*Pattern{nil, pat} {
			v, err := ParseNumber(reply, p, "", unit)
			if err != nil {
				if !errors.Is(err, ErrBadReply) {
					t.Fatalf("%q: error %v does not wrap ErrBadReply", reply, err)
				}
				continue
			}
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("%q parsed to %v", reply, v)
			}
			if !strings.ContainsAny(reply, "0123456789") {
				t.Fatalf("%q has no digit but parsed to %v", reply, v)
			}
		}
	})
}

func FuzzParseCounts(f *testing.F) {
	for _, s := range []string{"1 2", "CNT 1 2", "1,2", "-1 2", "99999999999999999999 1"} {
		f.Add(s)
	}
	pat := MustPattern(`^CNT (?P<x>\S+) (?P<xx>\S+)$`)
	f.Fuzz(func(t *testing.T, reply string) {
		for _, p := range []*Pattern{nil, pat} {
			c, err := ParseCounts(reply, p, []string{"x", "xx"})
			if err != nil {
				if !errors.Is(err, ErrBadReply) {
					t.Fatalf("%q: %v", reply, err)
				}
				continue
			}
			if len(c) != 2 {
				t.Fatalf("%q: %d counts", reply, len(c))
			}
		}
	})
}

func FuzzTemplate(f *testing.F) {
	for _, s := range []string{"MOVE {value:%.3f}", "{axis}GO {value:%d}", "ACQ {gate_ms:%08.2e}", "{{}}", "X{value"} {
		f.Add(s, 1.5, "1", 100.0)
	}
	f.Fuzz(func(t *testing.T, src string, value float64, axisName string, gate float64) {
		tp, err := ParseTemplate(src, "value", "axis", "gate_ms", "gate_s")
		if err != nil {
			return
		}
		out, err := tp.Render(Vars{Value: value, Axis: axisName, GateMS: gate})
		if err != nil {
			return
		}
		if strings.ContainsAny(out, "\r\n") {
			t.Fatalf("%q rendered a line break: %q", src, out)
		}
		if !tp.Uses("value") && !tp.Uses("axis") && !tp.Uses("gate_ms") && !tp.Uses("gate_s") {
			// A template without placeholders renders its literal text.
			want := strings.ReplaceAll(strings.ReplaceAll(src, "{{", "{"), "}}", "}")
			if out != want {
				t.Fatalf("%q rendered %q, want %q", src, out, want)
			}
		}
	})
}
