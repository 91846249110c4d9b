package drivers

import (
	"math"
	"sync"
	"testing"

	"github.com/gliss-lab/gliss/drivers/calib"
)

func demoCalibration() Calibration {
	return Calibration{
		Stretcher:  calib.Stretcher{LinesPerMM: 1800, WavelengthNM: 785, Littrow: true, Passes: 4, Lever: 2, ZeroMM: 600},
		Attenuator: calib.Malus{PMinUW: 0.05, PMaxUW: 200},
	}
}

// TestCalibrationSetRoundTrip: a calibration becomes a set and back; a
// part the bench lacks is left out and kept from the base.
func TestCalibrationSetRoundTrip(t *testing.T) {
	c := demoCalibration()
	c.PulseArea = &calib.PulseArea{AreaPiPerSqrtUW: 0.9}
	c.Version = 4
	s := c.Set()
	if s.Version != 4 || s.Stretcher == nil || s.Attenuator == nil || s.Attenuator.Malus == nil || s.PulseArea == nil {
		t.Fatalf("set %+v", s)
	}
	if _, err := calib.EncodeSet(s); err != nil {
		t.Fatalf("encode: %v", err)
	}
	back := CalibrationFromSet(s, Calibration{})
	if back.Stretcher != c.Stretcher || back.Attenuator != c.Attenuator || back.PulseArea.AreaPiPerSqrtUW != 0.9 || back.Version != 4 {
		t.Errorf("round trip %+v", back)
	}
	if s := (Calibration{Attenuator: c.Attenuator}).Set(); s.Stretcher != nil || s.Attenuator == nil {
		t.Errorf("bench without a stretcher: %+v", s)
	}
	nd := calib.Attenuator{ND: &calib.NDWheel{P0UW: 100, ODPerDeg: 0.01, MinDeg: 0, MaxDeg: 200}}
	withND := CalibrationFromSet(calib.Set{Schema: 1, Version: 5, Attenuator: &nd}, c)
	lo, hi := withND.PowerRangeUW()
	if withND.Stretcher != c.Stretcher || math.Abs(lo-1) > 1e-9 || math.Abs(hi-100) > 1e-9 {
		t.Errorf("ND law: range %g–%g µW, stretcher %+v", lo, hi, withND.Stretcher)
	}
	if deg, err := withND.AngleDeg(10); err != nil || math.Abs(deg-100) > 1e-9 {
		t.Errorf("ND angle for 10 µW: %g, %v", deg, err)
	}
}

// TestCurrentCalibrationSwap: SetCalibration and CurrentCalibration are
// safe together (run with -race); the nominal field stays as it was.
func TestCurrentCalibrationSwap(t *testing.T) {
	b := &Bench{Calibration: demoCalibration()}
	if b.CurrentCalibration().Version != 0 {
		t.Fatal("nominal version")
	}
	var wg sync.WaitGroup
	for v := 1; v <= 50; v++ {
		wg.Add(2)
		go func() {
			defer wg.Done()
			c := demoCalibration()
			c.Version = v
			b.SetCalibration(c)
		}()
		go func() { defer wg.Done(); _ = b.CurrentCalibration().Version }()
	}
	wg.Wait()
	if v := b.CurrentCalibration().Version; v < 1 || v > 50 || b.Calibration.Version != 0 {
		t.Errorf("after the swaps: current version %d, nominal %d", v, b.Calibration.Version)
	}
}
