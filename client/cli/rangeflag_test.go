package cli

import (
	"math"
	"strings"
	"testing"
)

func TestParseRange(t *testing.T) {
	for _, c := range []struct {
		in       string
		from, to float64
		n        int
	}{
		{"-25:25:101", -25, 25, 101},
		{" 0:10:1 ", 0, 10, 1},
		{"3.5", 3.5, 3.5, 1},
		{"1e-3:2E1:2", 1e-3, 20, 2},
		{"5:-5:100000", 5, -5, 100000},
	} {
		from, to, n, err := ParseRange(c.in)
		if err != nil || from != c.from || to != c.to || n != c.n {
			t.Errorf("ParseRange(%q) = %g, %g, %d, %v; want %g, %g, %d", c.in, from, to, n, err, c.from, c.to, c.n)
		}
	}
	for _, c := range []struct{ in, want string }{
		{"", "not a number"},
		{"NaN:1:3", "not finite"},
		{"0:Inf:3", "not finite"},
		{"0:1:0", "allowed 1 to 100000"},
		{"0:1:-4", "allowed 1 to 100000"},
		{"0:1:100001", "allowed 1 to 100000"},
		{"0:1:2.5", "whole number"},
		{"0:1", "not a range"},
		{"0:1:2:3", "not a range"},
		{"1e999", "out of range"},
		{"x:1:2", "FROM"},
	} {
		if _, _, _, err := ParseRange(c.in); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("ParseRange(%q) error = %v, want one containing %q", c.in, err, c.want)
		}
	}
}

func TestParseList(t *testing.T) {
	v, err := ParseList("1, 2.5,-3")
	if err != nil || len(v) != 3 || v[0] != 1 || v[1] != 2.5 || v[2] != -3 {
		t.Errorf("ParseList = %v, %v", v, err)
	}
	for _, in := range []string{"1,,2", "1,nan", "a", "1,+Inf"} {
		if _, err := ParseList(in); err == nil {
			t.Errorf("ParseList(%q) accepted", in)
		}
	}
}

func TestRangeValues(t *testing.T) {
	v := RangeValues(-1, 1, 5)
	for i, w := range []float64{-1, -0.5, 0, 0.5, 1} {
		if v[i] != w {
			t.Fatalf("RangeValues(-1, 1, 5) = %v", v)
		}
	}
	if v := RangeValues(2, 7, 1); len(v) != 1 || v[0] != 2 {
		t.Errorf("RangeValues(2, 7, 1) = %v", v)
	}
}

// FuzzParseRange: whatever the input, ParseRange either fails or returns
// finite ends and 1 ≤ N ≤ MaxRangeN, and a result formatted back parses to
// the same values.
func FuzzParseRange(f *testing.F) {
	for _, s := range []string{"-25:25:101", "3", "0:1:0", "NaN", "1e308:-1e308:2", " 1 : 2 : 3 ", "::", "0x10:1:2"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		from, to, n, err := ParseRange(s)
		if err != nil {
			if err.Error() == "" {
				t.Fatal("empty error")
			}
			return
		}
		if math.IsNaN(from) || math.IsInf(from, 0) || math.IsNaN(to) || math.IsInf(to, 0) || n < 1 || n > MaxRangeN {
			t.Fatalf("ParseRange(%q) = %g, %g, %d", s, from, to, n)
		}
		v := RangeValues(from, to, n)
		if len(v) != n || v[0] != from || v[n-1] != to && n > 1 {
			t.Fatalf("RangeValues(%g, %g, %d) ends %g, %g", from, to, n, v[0], v[n-1])
		}
		for _, x := range v {
			if math.IsNaN(x) || math.IsInf(x, 0) {
				t.Fatalf("RangeValues(%g, %g, %d) has %g", from, to, n, x)
			}
		}
	})
}

// FuzzParseList: ParseList either fails or returns 1…MaxRangeN finite values.
func FuzzParseList(f *testing.F) {
	for _, s := range []string{"1,2,3", "", "1,,2", " -1e3 , 4", "NaN", "1e400"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		v, err := ParseList(s)
		if err != nil {
			return
		}
		if len(v) < 1 || len(v) > MaxRangeN {
			t.Fatalf("ParseList(%q): %d values", s, len(v))
		}
		for _, x := range v {
			if math.IsNaN(x) || math.IsInf(x, 0) {
				t.Fatalf("ParseList(%q) has %g", s, x)
			}
		}
	})
}
