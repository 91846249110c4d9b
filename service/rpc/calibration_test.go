package rpc

import (
	"encoding/json"
	"strings"
	"testing"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

func TestDecodeSetPatch(t *testing.T) {
	p, err := decodeSetPatch([]byte(`{"schema":1,"version":4,"created":"2026-12-02T00:00:00Z","note":"x","pulse_area":{"area_pi_per_sqrt_uw":0.9}}`))
	if err != nil || p.PulseArea == nil || p.PulseArea.AreaPiPerSqrtUW != 0.9 || p.Stretcher != nil {
		t.Fatalf("patch %+v, %v", p, err)
	}
	for _, bad := range []string{``, `{"pulse_aera":{}}`, `{"pulse_area":{}} {}`, `[1]`, `{"attenuator":{"malus":{"p_max":3}}}`} {
		if _, err := decodeSetPatch([]byte(bad)); err == nil {
			t.Errorf("%q decoded", bad)
		}
	}
}

// FuzzDecodeSetPatch: whatever a client sends as set_json decodes or is an
// error; a decoded patch re-encodes as JSON the decoder accepts again.
func FuzzDecodeSetPatch(f *testing.F) {
	f.Add([]byte(`{"pulse_area":{"area_pi_per_sqrt_uw":0.9}}`))
	f.Add([]byte(`{"attenuator":{"nd_wheel":{"p0_uw":200,"od_per_deg":0.01,"min_deg":0,"max_deg":300}}}`))
	f.Add([]byte(`{"stretcher":{"lines_per_mm":1800,"wavelength_nm":785,"littrow":true,"passes":4,"lever":2,"zero_mm":600}}`))
	f.Add([]byte(`{"created":null}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		p, err := decodeSetPatch(b)
		if err != nil {
			return
		}
		// Validation never panics on what decodes.
		if p.Stretcher != nil {
			_ = p.Stretcher.Validate()
		}
		if p.Attenuator != nil {
			_ = p.Attenuator.Validate()
		}
		if p.PulseArea != nil {
			_ = p.PulseArea.Validate()
		}
		again, err := json.Marshal(p)
		if err != nil {
			return // e.g. NaN cannot be written; it cannot be read either
		}
		if _, err := decodeSetPatch(again); err != nil && !strings.Contains(err.Error(), "created") {
			t.Fatalf("re-encoded patch %s: %v", again, err)
		}
	})
}

func TestChirpPowerPoints(t *testing.T) {
	sc := &glissv1.Scan{Id: "s", Spec: &glissv1.ScanSpec{Axes: []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI}}}}
	g, p := 0.0, 4.0
	pts := []*glissv1.Point{{Seq: 0, Index: []uint32{3}, Values: []float64{2}, Counts: []uint64{1, 2}, Commanded: &glissv1.Commanded{GddPs2: &g, PowerUw: &p}}}
	out, err := chirpPowerPoints(sc, pts)
	if err != nil || len(out) != 1 || out[0].Index[0] != 0 || out[0].Index[1] != 3 || out[0].Values[0] != 0 || out[0].Values[1] != 4 {
		t.Fatalf("%v, %v", out, err)
	}
	sc.Spec.Axes = []*glissv1.Axis{{Kind: glissv1.AxisKind_AXIS_KIND_DETUNING_MEV}}
	if _, err := chirpPowerPoints(sc, pts); err == nil {
		t.Error("a detuning sweep analysed over power")
	}
}
