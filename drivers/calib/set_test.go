package calib

import (
	"bytes"
	"math"
	"reflect"
	"strings"
	"testing"
	"time"
)

func demoSet() Set {
	return Set{
		Schema:     SetSchema,
		Version:    3,
		Stretcher:  &Stretcher{LinesPerMM: 1800, WavelengthNM: 785, IncidenceDeg: math.NaN(), Littrow: true, Passes: 4, Lever: 2, ZeroMM: 600},
		Attenuator: &Attenuator{Malus: &Malus{PMinUW: 0.05, PMaxUW: 200, Theta0Deg: 3}},
		PulseArea:  &PulseArea{AreaPiPerSqrtUW: 1, SigmaAreaPiPerSqrtUW: 0.01, PiPowerUW: 1.2, SigmaPiPowerUW: 0.02, PiAreaPi: 1.1},
		Created:    time.Date(2026, 12, 2, 1, 0, 0, 0, time.UTC),
		Note:       "demo bench (invented values)",
	}
}

func TestSetRoundTrip(t *testing.T) {
	s := demoSet()
	b, err := EncodeSet(s)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"lines_per_mm": 1800`, `"p_max_uw": 200`, `"area_pi_per_sqrt_uw": 1`, `"version": 3`} {
		if !bytes.Contains(b, []byte(want)) {
			t.Errorf("encoded set lacks %s:\n%s", want, b)
		}
	}
	if bytes.Contains(b, []byte("incidence_deg")) {
		t.Errorf("Littrow stretcher wrote incidence_deg:\n%s", b)
	}
	got, err := DecodeSet(b)
	if err != nil {
		t.Fatal(err)
	}
	g1, _ := s.GDDPS2(1000)
	g2, err := got.GDDPS2(1000)
	if err != nil || g1 != g2 || !math.IsNaN(got.Stretcher.IncidenceDeg) {
		t.Errorf("stretcher after round trip: %+v (GDD %g vs %g)", got.Stretcher, g2, g1)
	}
	got.Stretcher, s.Stretcher = nil, nil
	if !reflect.DeepEqual(got, s) {
		t.Errorf("round trip:\n got %+v\nwant %+v", got, s)
	}
	// An explicit incidence survives.
	s = demoSet()
	s.Stretcher.Littrow, s.Stretcher.IncidenceDeg = false, 40
	b, _ = EncodeSet(s)
	got, err = DecodeSet(b)
	if err != nil || got.Stretcher.IncidenceDeg != 40 || got.Stretcher.Littrow {
		t.Errorf("incidence 40°: got %+v, %v", got.Stretcher, err)
	}
}

func TestDecodeSetRejects(t *testing.T) {
	good, _ := EncodeSet(demoSet())
	cases := map[string]string{
		"unknown field":    strings.Replace(string(good), `"version"`, `"versoin"`, 1),
		"bad schema":       strings.Replace(string(good), `"schema": 1`, `"schema": 2`, 1),
		"negative version": strings.Replace(string(good), `"version": 3`, `"version": -1`, 1),
		"bad passes":       strings.Replace(string(good), `"passes": 4`, `"passes": 0`, 1),
		"trailing":         string(good) + "{}",
		"go field names":   `{"schema":1,"version":1,"created":"2026-12-02T00:00:00Z","stretcher":{"LinesPerMM":1800}}`,
		"inverted malus":   strings.Replace(string(good), `"p_max_uw": 200`, `"p_max_uw": 0.01`, 1),
		"negative area":    strings.Replace(string(good), `"area_pi_per_sqrt_uw": 1`, `"area_pi_per_sqrt_uw": -1`, 1),
		"not json":         "schema=1",
		"empty":            "",
		"two attenuators":  strings.Replace(string(good), `"malus": {`, `"nd_wheel": {"p0_uw": 1, "od_per_deg": 0.01, "min_deg": 0, "max_deg": 10}, "malus": {`, 1),
	}
	for name, in := range cases {
		if _, err := DecodeSet([]byte(in)); err == nil {
			t.Errorf("%s: decoded without error:\n%s", name, in)
		}
	}
}

func FuzzDecodeSet(f *testing.F) {
	good, _ := EncodeSet(demoSet())
	f.Add(good)
	f.Add([]byte(`{"schema":1,"version":1,"created":"2026-12-02T00:00:00Z"}`))
	f.Add([]byte(`{"schema":1,"version":1,"created":"2026-12-02T00:00:00Z","attenuator":{"nd_wheel":{"p0_uw":2,"od_per_deg":0.1,"min_deg":0,"max_deg":9}}}`))
	f.Add([]byte(`{"stretcher":{"incidence_deg":1e308}}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		s, err := DecodeSet(b)
		if err != nil {
			return
		}
		// Whatever decodes re-encodes and decodes to the same set.
		b2, err := EncodeSet(s)
		if err != nil {
			t.Fatalf("decoded set does not encode: %v", err)
		}
		s2, err := DecodeSet(b2)
		if err != nil {
			t.Fatalf("re-encoded set does not decode: %v\n%s", err, b2)
		}
		b3, _ := EncodeSet(s2)
		if !bytes.Equal(b2, b3) {
			t.Fatalf("encoding not stable:\n%s\n%s", b2, b3)
		}
	})
}
