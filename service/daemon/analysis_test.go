package daemon_test

import (
	"context"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/service/analysis"
	"github.com/gliss-lab/gliss/service/daemon"
	simbench "github.com/gliss-lab/gliss/sim/bench"
	"github.com/gliss-lab/gliss/sim/cryostat"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// waitEnd polls a scan until it is terminal.
func waitEnd(t *testing.T, ctx context.Context, c *client.Client, id string) *glissv1.Scan {
	t.Helper()
	for {
		sc, err := c.Get(ctx, id)
		if err != nil {
			t.Fatalf("get %s: %v", id, err)
		}
		if client.IsTerminal(sc.State) {
			if sc.State != glissv1.ScanState_SCAN_STATE_SUCCEEDED {
				t.Fatalf("scan %s ended %v: %s", id, sc.State, sc.Reason)
			}
			return sc
		}
		select {
		case <-ctx.Done():
			t.Fatalf("scan %s: %v (state %v)", id, ctx.Err(), sc.State)
		case <-time.After(10 * time.Millisecond):
		}
	}
}

func points(t *testing.T, ctx context.Context, c *client.Client, id string) []*glissv1.Point {
	t.Helper()
	var out []*glissv1.Point
	for p, err := range c.Points(ctx, id, 0) {
		if err != nil {
			t.Fatalf("points of %s: %v", id, err)
		}
		out = append(out, p)
	}
	return out
}

func decodeRecord(t *testing.T, rec *glissv1.CalibrationRecord) calib.Set {
	t.Helper()
	s, err := calib.DecodeSet([]byte(rec.GetSetJson()))
	if err != nil {
		t.Fatalf("calibration record version %d: %v", rec.GetVersion(), err)
	}
	return s
}

// TestCalibrationPutUsedByNewScans: version 0 is the simulated bench's
// nominal set; a bad part is InvalidArgument naming it; a put pulse-area
// calibration makes pulse-area axes possible, and the new scan plans with
// it and records it.
func TestCalibrationPutUsedByNewScans(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimInstant: true})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	cs := glissv1.NewCalibrationServiceClient(c.Conn())

	cur, err := cs.GetCalibration(ctx, &glissv1.GetCalibrationRequest{})
	if err != nil {
		t.Fatal(err)
	}
	nom := decodeRecord(t, cur)
	if cur.Version != 0 || cur.Bench != "sim" || nom.Stretcher == nil || nom.Attenuator == nil || *nom.Attenuator.Malus != simbench.DemoAttenuator() || nom.PulseArea != nil {
		t.Fatalf("nominal calibration: %v", cur)
	}
	areaSpec := client.Options{GateMS: 10, Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 0)}}.Spec(
		client.Axis(glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI, client.List(0.5, 1, 2)))
	if _, err := c.Submit(ctx, areaSpec); status.Code(err) != codes.InvalidArgument || !slices.Contains(fieldsOf(err), "spec.axes[0].list.values[0]") {
		t.Fatalf("pulse-area axis before the calibration: %v (fields %v)", err, fieldsOf(err))
	}

	_, err = cs.PutCalibration(ctx, &glissv1.PutCalibrationRequest{SetJson: `{"attenuator":{"malus":{"p_min_uw":5,"p_max_uw":1,"theta0_deg":0}}}`})
	if status.Code(err) != codes.InvalidArgument || !slices.Equal(fieldsOf(err), []string{"set_json.attenuator"}) {
		t.Fatalf("bad attenuator: %v (fields %v)", err, fieldsOf(err))
	}
	if _, err := cs.PutCalibration(ctx, &glissv1.PutCalibrationRequest{SetJson: `{"pulse_aera":{}}`}); status.Code(err) != codes.InvalidArgument || !slices.Equal(fieldsOf(err), []string{"set_json"}) {
		t.Fatalf("unknown key: %v", err)
	}

	// Θ/π = 0.5·√(P/µW): 1 π at 4 µW (an invented calibration, not the truth).
	rec, err := cs.PutCalibration(ctx, &glissv1.PutCalibrationRequest{SetJson: `{"pulse_area":{"area_pi_per_sqrt_uw":0.5}}`, Note: "test"})
	if err != nil {
		t.Fatal(err)
	}
	put := decodeRecord(t, rec)
	if rec.Version != 1 || put.PulseArea.AreaPiPerSqrtUW != 0.5 || put.Stretcher == nil || put.Attenuator == nil {
		t.Fatalf("put: %v", rec)
	}
	list, err := cs.ListCalibrations(ctx, &glissv1.ListCalibrationsRequest{})
	if err != nil || len(list.Calibrations) != 2 || list.CurrentVersion != 1 || list.Calibrations[0].Version != 1 || list.Calibrations[1].Version != 0 {
		t.Fatalf("list: %v, %v", list, err)
	}

	sc, err := c.Submit(ctx, areaSpec)
	if err != nil {
		t.Fatalf("pulse-area scan after the calibration: %v", err)
	}
	if sc.GetCalibration().GetVersion() != 1 {
		t.Errorf("new scan records calibration version %d, want 1", sc.GetCalibration().GetVersion())
	}
	waitEnd(t, ctx, c, sc.Id)
	for _, p := range points(t, ctx, c, sc.Id) {
		area := p.Values[0]
		if want := (area / 0.5) * (area / 0.5); math.Abs(p.Commanded.GetPowerUw()-want) > 1e-9*want {
			t.Errorf("area %g π: commanded %g µW, want %g", area, p.Commanded.GetPowerUw(), want)
		}
	}
	got, err := cs.GetCalibration(ctx, &glissv1.GetCalibrationRequest{Version: new(uint32(0))})
	if err != nil || got.Version != 0 {
		t.Errorf("get version 0: %v, %v", got, err)
	}
	if _, err := cs.GetCalibration(ctx, &glissv1.GetCalibrationRequest{Version: new(uint32(7))}); status.Code(err) != codes.NotFound {
		t.Errorf("get version 7: %v, want NotFound", err)
	}
}

// TestAttenuatorCalibrationRun: the procedure sweeps the simulated
// attenuator, fits Malus's law to the power meter's readings (the truth is
// the demo attenuator: 0.05–200 µW, θ0 = 0°, PHYSICS.md), stores a new
// version; it is refused while a scan holds the bench.
func TestAttenuatorCalibrationRun(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimSpeed: 20, SimSeed: 3})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	cs := glissv1.NewCalibrationServiceClient(c.Conn())

	if _, err := cs.RunAttenuatorCalibration(ctx, &glissv1.RunAttenuatorCalibrationRequest{FromDeg: 0, ToDeg: 400}); status.Code(err) != codes.InvalidArgument || !slices.Equal(fieldsOf(err), []string{"to_deg"}) {
		t.Fatalf("to_deg 400: %v", err)
	}
	res, err := cs.RunAttenuatorCalibration(ctx, &glissv1.RunAttenuatorCalibrationRequest{FromDeg: 0, ToDeg: 90, Count: 31, Note: "test sweep"})
	if err != nil {
		t.Fatal(err)
	}
	set := decodeRecord(t, res.Calibration)
	m := set.Attenuator.Malus
	// Readings carry 1 % laser and 0.5 % meter noise (sim/bench defaults):
	// 2 % on Pmax, 0.5° on θ0 is several σ of a 31-reading fit.
	if res.Calibration.Version != 1 || m == nil || math.Abs(m.PMaxUW-200)/200 > 0.02 || math.Abs(m.Theta0Deg) > 0.5 || m.PMinUW > 2 {
		t.Fatalf("fitted law %+v (version %d)", m, res.Calibration.Version)
	}
	if len(res.ResidualsUw) != 31 || res.RmsResidualUw <= 0 || res.RmsResidualUw > 0.02*200 || res.MaxResidualUw < res.RmsResidualUw {
		t.Errorf("residuals: rms %g, max %g µW, %d of them", res.RmsResidualUw, res.MaxResidualUw, len(res.ResidualsUw))
	}
	for i, a := range res.AnglesDeg {
		if want := float64(i) * 3; math.Abs(a-want) > 1e-9 {
			t.Errorf("angle %d: %g°, want %g°", i, a, want)
		}
	}

	// The ND-wheel law, dry run: fitted and reported, nothing stored (the
	// simulated plate is no ND wheel: a poor fit, but a law over 0–40°).
	nd, err := cs.RunAttenuatorCalibration(ctx, &glissv1.RunAttenuatorCalibrationRequest{FromDeg: 0, ToDeg: 40, Count: 9, Law: glissv1.AttenuatorLaw_ATTENUATOR_LAW_ND_WHEEL, DryRun: true})
	if err != nil {
		t.Fatal(err)
	}
	if nd.Calibration.GetVersion() != 1 || !strings.Contains(nd.FitJson, `"od_per_deg"`) || len(nd.ResidualsUw) != 9 {
		t.Errorf("ND dry run: version %d, fit %s", nd.Calibration.GetVersion(), nd.FitJson)
	}

	// A scan on the bench: the procedure is refused.
	sc, err := c.Submit(ctx, client.PowerSpec(client.Range(1, 10, 10), client.Options{GateMS: 2000}))
	if err != nil {
		t.Fatal(err)
	}
	if sc.GetCalibration().GetVersion() != 1 {
		t.Errorf("scan after the calibration records version %d, want 1", sc.GetCalibration().GetVersion())
	}
	for {
		s, err := c.Get(ctx, sc.Id)
		if err != nil {
			t.Fatal(err)
		}
		if s.State == glissv1.ScanState_SCAN_STATE_RUNNING {
			break
		}
		time.Sleep(5 * time.Millisecond)
	}
	if _, err := cs.RunAttenuatorCalibration(ctx, &glissv1.RunAttenuatorCalibrationRequest{}); status.Code(err) != codes.FailedPrecondition || !strings.Contains(err.Error(), sc.Id) {
		t.Errorf("calibration during a scan: %v, want FailedPrecondition naming the scan", err)
	}
	if _, err := c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: sc.Id}); err != nil {
		t.Fatal(err)
	}
}

// TestPulseAreaCalibration: a zero-chirp power sweep on the simulated bench
// calibrates the pulse area; the fit recovers the bench's true π-pulse
// power within its error. Truth: Θ = π·sqrt(P/1 µW) (sim/bench, demo
// coupling), so the π pulse is at Θmax² µW with Θmax the first maximum of
// the demo dot's XX yield at zero chirp with its phonons (≈ 3.5 π for
// two-photon excitation of the demo dot, sim/phonon).
func TestPulseAreaCalibration(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimInstant: true, SimSeed: 5})
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	cs := glissv1.NewCalibrationServiceClient(c.Conn())

	spec := client.PowerSpec(client.Range(0.05, 40, 40), client.Options{GateMS: 100, AmplitudeSpacing: true,
		Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 0)}})
	sc, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	waitEnd(t, ctx, c, sc.Id)
	// The simulated dot has the demo phonons at the cryostat's 4.2 K
	// (sim/bench, PHYSICS.md §7): the fit uses the same bath.
	bath := phonon.DemoBath()
	res, err := cs.CalibratePulseArea(ctx, &glissv1.CalibratePulseAreaRequest{ScanId: sc.Id,
		Phonons: &glissv1.Phonons{AlphaPs2: bath.AlphaPS2, CutoffMev: bath.CutoffMeV, TemperatureK: bath.TemperatureK}})
	if err != nil {
		t.Fatal(err)
	}
	curve, err := analysis.YieldCurveBath(ctx, model.DemoParams(), &bath, analysis.ChannelXX, 0, 10, 0.01)
	if err != nil {
		t.Fatal(err)
	}
	thMax, err := curve.FirstMaximumAreaPi()
	if err != nil {
		t.Fatal(err)
	}
	truePi := thMax * thMax // µW, P1 = 1 µW
	t.Logf("π pulse: fitted %.5f ± %.5f µW, true %.5f µW; scale %.5f ± %.5f π/√µW; χ²/DoF %.2f",
		res.PiPowerUw, res.SigmaPiPowerUw, truePi, res.AreaPiPerSqrtUw, res.SigmaAreaPiPerSqrtUw, res.RedChiSq)
	if res.SigmaPiPowerUw <= 0 || math.Abs(res.PiPowerUw-truePi) > 2*res.SigmaPiPowerUw {
		t.Errorf("π-pulse power %.5f ± %.5f µW, true %.5f µW: more than 2σ off", res.PiPowerUw, res.SigmaPiPowerUw, truePi)
	}
	if res.Calibration.GetVersion() != 1 || decodeRecord(t, res.Calibration).PulseArea.AreaPiPerSqrtUW != res.AreaPiPerSqrtUw {
		t.Errorf("stored calibration %v", res.Calibration)
	}
	// A chirped sweep is refused.
	chirped := client.PowerSpec(client.Range(0.05, 9, 8), client.Options{GateMS: 10, Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 10)}})
	sc2, err := c.Submit(ctx, chirped)
	if err != nil {
		t.Fatal(err)
	}
	waitEnd(t, ctx, c, sc2.Id)
	if _, err := cs.CalibratePulseArea(ctx, &glissv1.CalibratePulseAreaRequest{ScanId: sc2.Id}); status.Code(err) != codes.FailedPrecondition {
		t.Errorf("chirped sweep: %v, want FailedPrecondition", err)
	}
}

// TestReplayCompareAnalyse: a map replayed on a fresh simulated bench with
// the same seed and calibration gives identical counts (twice); compare
// reports zero deviation against the replay and a non-zero one against a
// different seed's run; analyse finds the chirped plateau more robust than
// zero chirp; the theory map is the model in the scan's axes.
func TestReplayCompareAnalyse(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimInstant: true, SimSeed: 11})
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	an := glissv1.NewAnalysisServiceClient(c.Conn())

	gdd := []float64{-20, 0, 20}
	spec := client.MapSpec(client.List(gdd...), client.Range(0.25, 81, 24), client.Options{Name: "replay map", GateMS: 100, Snake: true, AmplitudeSpacing: true})
	orig, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	orig = waitEnd(t, ctx, c, orig.Id)
	pa := points(t, ctx, c, orig.Id)

	var replays [][]*glissv1.Point
	var ids []string
	for range 2 {
		r, err := an.ReplayScan(ctx, &glissv1.ReplayScanRequest{Id: orig.Id})
		if err != nil {
			t.Fatal(err)
		}
		if r.Scan.ReplayOf != orig.Id || r.Scan.SimSeed != 11 || r.Scan.GetCalibration().GetSetJson() != orig.GetCalibration().GetSetJson() {
			t.Fatalf("replay record: replay_of %q seed %d calibration %v", r.Scan.ReplayOf, r.Scan.SimSeed, r.Scan.GetCalibration())
		}
		waitEnd(t, ctx, c, r.Scan.Id)
		replays = append(replays, points(t, ctx, c, r.Scan.Id))
		ids = append(ids, r.Scan.Id)
	}
	for k, pb := range replays {
		if len(pb) != len(pa) {
			t.Fatalf("replay %d: %d points, original %d", k, len(pb), len(pa))
		}
		for i := range pa {
			if !slices.Equal(pa[i].Counts, pb[i].Counts) || !slices.Equal(pa[i].Index, pb[i].Index) || pa[i].GetMeasuredPowerUw() != pb[i].GetMeasuredPowerUw() {
				t.Fatalf("replay %d point %d: counts %v power %g, original %v power %g", k, i, pb[i].Counts, pb[i].GetMeasuredPowerUw(), pa[i].Counts, pa[i].GetMeasuredPowerUw())
			}
		}
	}
	cmp, err := an.CompareScans(ctx, &glissv1.CompareScansRequest{A: orig.Id, B: ids[0]})
	if err != nil {
		t.Fatal(err)
	}
	if cmp.Matched != uint64(len(pa)) || len(cmp.Rows) != len(pa) || len(cmp.Channels) < 2 {
		t.Fatalf("compare: %v", cmp)
	}
	for _, ch := range cmp.Channels {
		if ch.Rms != 0 || ch.MaxAbs != 0 {
			t.Errorf("compare with the replay: channel %s rms %g max %g, want 0", ch.Channel, ch.Rms, ch.MaxAbs)
		}
	}

	// The same spec run again on the daemon's bench: its noise streams have
	// moved on, so the counts differ.
	again, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	waitEnd(t, ctx, c, again.Id)
	cmp2, err := an.CompareScans(ctx, &glissv1.CompareScansRequest{A: orig.Id, B: again.Id})
	if err != nil {
		t.Fatal(err)
	}
	if xx := cmp2.Channels[1]; xx.Channel != "xx" || !(xx.Rms > 0) || xx.MaxAbs < xx.Rms {
		t.Errorf("compare with a second run: %v", xx)
	}

	// Plateau analysis: the chirped rows reach a plateau over a wider power
	// range than the Rabi-oscillating zero chirp (PHYSICS.md §3).
	rep, err := an.AnalyseScan(ctx, &glissv1.AnalyseScanRequest{Id: orig.Id})
	if err != nil {
		t.Fatal(err)
	}
	if len(rep.Chirps) != 3 || math.Abs(rep.BestGddPs2) != 20 || rep.ZeroGddPs2 != 0 || !(rep.PiFidelity > 0.5 && rep.PiFidelity < 1.3) {
		t.Errorf("analysis: best %g ps², zero %g ps², π fidelity %g (%s)", rep.BestGddPs2, rep.ZeroGddPs2, rep.PiFidelity, rep.FidelityReference)
	}
	if z, b := rep.Chirps[rep.Zero], rep.Chirps[rep.Best]; !(b.RangeUw > z.RangeUw) {
		t.Errorf("plateau ranges: zero chirp %g µW, best %g µW", z.RangeUw, b.RangeUw)
	}

	// Model fit of the whole map with the bench's phonons: recovers the
	// simulated dot (sim/bench truth: area scale 1 π/√µW, E_B 4.1 meV,
	// detuning 0, PHYSICS.md demo dot) within 3σ.
	demo := phonon.DemoBath()
	t0 := time.Now()
	fitRep, err := an.AnalyseScan(ctx, &glissv1.AnalyseScanRequest{Id: orig.Id, Fit: true, Model: &glissv1.DotModel{
		AreaPiPerSqrtUw: new(1.03), BindingMev: new(4.0), DetuningMev: new(0.02),
		Phonons: &glissv1.Phonons{AlphaPs2: demo.AlphaPS2, CutoffMev: demo.CutoffMeV, TemperatureK: demo.TemperatureK}}})
	if err != nil {
		t.Fatal(err)
	}
	fp, fs := fitRep.Fit.Params, fitRep.Fit.Sigma
	t.Logf("map fit (%v): area %.5f ± %.5f, E_B %.4f ± %.4f meV, Δ %.4f ± %.4f meV, A %.1f ± %.1f, B %.1f ± %.1f, χ²/DoF %.2f, %d iterations",
		time.Since(t0), fp.AreaPiPerSqrtUw, fs.AreaPiPerSqrtUw, fp.BindingMev, fs.BindingMev, fp.DetuningMev, fs.DetuningMev, fp.AmplitudeCounts, fs.AmplitudeCounts, fp.BackgroundCounts, fs.BackgroundCounts, fitRep.Fit.RedChiSq, fitRep.Fit.Iterations)
	for _, c := range []struct {
		name         string
		got, sd, tru float64
	}{{"area scale", fp.AreaPiPerSqrtUw, fs.AreaPiPerSqrtUw, 1}, {"binding", fp.BindingMev, fs.BindingMev, 4.1}, {"detuning", fp.DetuningMev, fs.DetuningMev, 0}} {
		if !(c.sd > 0) || math.Abs(c.got-c.tru) > 3*c.sd {
			t.Errorf("fitted %s %g ± %g, true %g", c.name, c.got, c.sd, c.tru)
		}
	}
	if len(fitRep.Fit.Residuals) != 3 || len(fitRep.Fit.Residuals[0].Values) != 24 {
		t.Errorf("residual map %d rows", len(fitRep.Fit.Residuals))
	}

	// Theory map in the scan's axes: at the zero-chirp π pulse the model
	// yield is the demo dot's (sim/model), whatever the counts.
	th, err := an.TheoryMap(ctx, &glissv1.TheoryMapRequest{Id: orig.Id, Model: &glissv1.DotModel{AreaPiPerSqrtUw: new(1.0)}})
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(th.GddPs2, gdd) || len(th.PowerUw) != 24 || len(th.Yield) != 3 || th.Counts != nil {
		t.Fatalf("theory map axes %v × %d powers, %d rows, counts %v", th.GddPs2, len(th.PowerUw), len(th.Yield), th.Counts != nil)
	}
	mp := model.DemoParams()
	mp.GDDPS2, mp.AreaPi = 20, math.Sqrt(th.PowerUw[5])
	want, err := model.Solve(mp)
	if err != nil {
		t.Fatal(err)
	}
	if got := th.Yield[2].Values[5]; math.Abs(got-want.NXX) > 1e-4 {
		t.Errorf("theory yield at 20 ps², %g µW: %g, model %g", th.PowerUw[5], got, want.NXX)
	}
	if _, err := an.TheoryMap(ctx, &glissv1.TheoryMapRequest{Id: orig.Id}); status.Code(err) != codes.InvalidArgument || !slices.Equal(fieldsOf(err), []string{"model.area_pi_per_sqrt_uw"}) {
		t.Errorf("theory map without an area scale: %v", err)
	}
}

// TestReplayUsesRecordedCalibration: a scan planned with calibration
// version 1 replays with version 1 even after version 2 is in use: the
// same angles are commanded and the counts are identical.
func TestReplayUsesRecordedCalibration(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimInstant: true, SimSeed: 31})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	cs := glissv1.NewCalibrationServiceClient(c.Conn())
	an := glissv1.NewAnalysisServiceClient(c.Conn())
	// An attenuator law 3° off the truth (invented numbers).
	if _, err := cs.PutCalibration(ctx, &glissv1.PutCalibrationRequest{SetJson: `{"attenuator":{"malus":{"p_min_uw":0.05,"p_max_uw":190,"theta0_deg":3}}}`}); err != nil {
		t.Fatal(err)
	}
	spec := client.PowerSpec(client.Range(1, 100, 8), client.Options{GateMS: 50, Fixed: []*glissv1.Setpoint{client.Fixed(glissv1.AxisKind_AXIS_KIND_GDD_PS2, 5)}})
	orig, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	waitEnd(t, ctx, c, orig.Id)
	if _, err := cs.PutCalibration(ctx, &glissv1.PutCalibrationRequest{SetJson: `{"attenuator":{"malus":{"p_min_uw":0.05,"p_max_uw":200,"theta0_deg":0}}}`}); err != nil {
		t.Fatal(err)
	}
	r, err := an.ReplayScan(ctx, &glissv1.ReplayScanRequest{Id: orig.Id})
	if err != nil {
		t.Fatal(err)
	}
	if r.Scan.GetCalibration().GetVersion() != 1 {
		t.Errorf("replay records calibration version %d, want 1", r.Scan.GetCalibration().GetVersion())
	}
	waitEnd(t, ctx, c, r.Scan.Id)
	pa, pb := points(t, ctx, c, orig.Id), points(t, ctx, c, r.Scan.Id)
	if len(pa) != 8 || len(pb) != 8 {
		t.Fatalf("%d and %d points", len(pa), len(pb))
	}
	for i := range pa {
		if pa[i].Commanded.GetAngleDeg() != pb[i].Commanded.GetAngleDeg() || !slices.Equal(pa[i].Counts, pb[i].Counts) {
			t.Errorf("point %d: angle %g° counts %v, replay %g° counts %v", i, pa[i].Commanded.GetAngleDeg(), pa[i].Counts, pb[i].Commanded.GetAngleDeg(), pb[i].Counts)
		}
	}
	// A new scan now uses version 2: other angles for the same powers.
	sc, err := c.Submit(ctx, spec)
	if err != nil {
		t.Fatal(err)
	}
	if sc.GetCalibration().GetVersion() != 2 {
		t.Errorf("new scan records version %d, want 2", sc.GetCalibration().GetVersion())
	}
	waitEnd(t, ctx, c, sc.Id)
	if pc := points(t, ctx, c, sc.Id); pc[0].Commanded.GetAngleDeg() == pa[0].Commanded.GetAngleDeg() {
		t.Errorf("version 2 commands the same angle %g° as version 1", pc[0].Commanded.GetAngleDeg())
	}
}

// TestReplayControl: a replay runs on its own engine and bench, yet it is
// paused, resumed and cancelled through ScanService like any scan.
func TestReplayControl(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimInstant: true, SimSeed: 5})
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	an := glissv1.NewAnalysisServiceClient(c.Conn())
	// Laser noise on: every point solves the dot model (~1 ms), so the
	// replay of 3000 points runs long enough to be caught.
	orig, err := c.Submit(ctx, client.MapSpec(client.Range(-20, 20, 30), client.Range(1, 150, 100), client.Options{Name: "to replay", GateMS: 10}))
	if err != nil {
		t.Fatal(err)
	}
	orig = waitEnd(t, ctx, c, orig.Id)
	r, err := an.ReplayScan(ctx, &glissv1.ReplayScanRequest{Id: orig.Id})
	if err != nil {
		t.Fatal(err)
	}
	id := r.Scan.Id
	waitState(t, ctx, c, id, glissv1.ScanState_SCAN_STATE_RUNNING)
	if _, err := c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: id, Reason: "look at the first rows"}); err != nil {
		t.Fatalf("pause a running replay: %v", err)
	}
	p := waitState(t, ctx, c, id, glissv1.ScanState_SCAN_STATE_PAUSED)
	time.Sleep(100 * time.Millisecond)
	if q, _ := c.Get(ctx, id); q.PointsStored != p.PointsStored {
		t.Errorf("paused replay stored %d more points", q.PointsStored-p.PointsStored)
	}
	if _, err := c.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: id}); err != nil {
		t.Fatalf("resume the replay: %v", err)
	}
	waitState(t, ctx, c, id, glissv1.ScanState_SCAN_STATE_RUNNING)
	if _, err := c.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: id, Reason: "enough"}); err != nil {
		t.Fatalf("cancel the replay: %v", err)
	}
	end := waitState(t, ctx, c, id, glissv1.ScanState_SCAN_STATE_CANCELLED)
	if end.PointsStored >= orig.PointsStored || end.PointsStored < p.PointsStored {
		t.Errorf("replay ended %v with %d of %d points (paused at %d)", end.State, end.PointsStored, orig.PointsStored, p.PointsStored)
	}
	// The replay's points are the original's, as far as they go.
	pa, pb := points(t, ctx, c, orig.Id), points(t, ctx, c, id)
	for i := range pb {
		if !slices.Equal(pa[i].Counts, pb[i].Counts) {
			t.Fatalf("point %d: replay counts %v, original %v", i, pb[i].Counts, pa[i].Counts)
		}
	}
}

// A scan of real instruments (a bench with no simulator seed, here the
// simulated bench posing as one, its cryostat at 12 K) is replayed with the
// sample at the temperature its points recorded, so the model's phonons see
// the sample's lattice, not the simulator's default 4.2 K.
func TestReplayAtRecordedTemperature(t *testing.T) {
	bench, err := simbench.New(simbench.Options{Seed: 9, Instant: true, Cryostat: cryostat.Options{InitialK: 12}})
	if err != nil {
		t.Fatal(err)
	}
	bench.TimeScale = 1e12
	bench.SimSeed = 0 // "real instruments"
	_, c := startDaemon(t, daemon.Config{Bench: bench})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	orig, err := c.Submit(ctx, client.ChirpSpec(client.Range(-10, 10, 5), client.Options{GateMS: 50}))
	if err != nil {
		t.Fatal(err)
	}
	waitEnd(t, ctx, c, orig.Id)
	r, err := glissv1.NewAnalysisServiceClient(c.Conn()).ReplayScan(ctx, &glissv1.ReplayScanRequest{Id: orig.Id})
	if err != nil {
		t.Fatal(err)
	}
	waitEnd(t, ctx, c, r.Scan.Id)
	pa, pb := points(t, ctx, c, orig.Id), points(t, ctx, c, r.Scan.Id)
	if len(pa) != 5 || len(pb) != 5 {
		t.Fatalf("%d and %d points", len(pa), len(pb))
	}
	for i := range pb {
		// reading noise σ 0.01 K (the demo cryostat)
		if k := pb[i].GetTemperatureK(); math.Abs(k-12) > 0.06 {
			t.Errorf("replay point %d: sample at %.3f K, the original's was %.3f K", i, k, pa[i].GetTemperatureK())
		}
	}
}
