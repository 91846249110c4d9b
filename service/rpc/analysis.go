package rpc

import (
	"context"
	"errors"
	"fmt"
	"math"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/service/analysis"
	"github.com/gliss-lab/gliss/service/sweep"
	"github.com/gliss-lab/gliss/sim/model"
)

// ScanReader is what the analysis service reads of the store.
type ScanReader interface {
	GetScan(id string) (*glissv1.Scan, error)
	ReadPoints(ctx context.Context, id string, from uint64, fn func(*glissv1.Point) error) error
}

// ReplayFunc runs a stored scan again on a simulated bench and returns the
// new scan record as queued.
type ReplayFunc func(ctx context.Context, original *glissv1.Scan) (*glissv1.Scan, error)

// Analysis implements gliss.v1.AnalysisService over the store.
type Analysis struct {
	glissv1.UnimplementedAnalysisServiceServer
	Store ScanReader
	// Replay runs replays (nil: ReplayScan is Unimplemented).
	Replay ReplayFunc
}

// maxAnalysedPoints bounds what one analysis reads into memory.
const maxAnalysedPoints = 1_000_000

func (a *Analysis) load(ctx context.Context, field, id string) (*glissv1.Scan, []*glissv1.Point, error) {
	if id == "" {
		return nil, nil, invalidField(field, "missing: give the scan id (gliss scan list shows them)")
	}
	sc, err := a.Store.GetScan(id)
	if err != nil {
		return nil, nil, toStatus(err)
	}
	var pts []*glissv1.Point
	err = a.Store.ReadPoints(ctx, id, 0, func(p *glissv1.Point) error {
		if len(pts) >= maxAnalysedPoints {
			return status.Errorf(codes.FailedPrecondition, "scan %s has more than %d points: too large to analyse in one request", id, maxAnalysedPoints)
		}
		pts = append(pts, p)
		return nil
	})
	if err != nil {
		return nil, nil, toStatus(err)
	}
	return sc, pts, nil
}

// scanSet decodes the calibration set a scan recorded (false if none).
func scanSet(sc *glissv1.Scan) (calib.Set, bool) {
	js := sc.GetCalibration().GetSetJson()
	if js == "" {
		return calib.Set{}, false
	}
	s, err := calib.DecodeSet([]byte(js))
	return s, err == nil
}

// chirpPowerPoints rewrites a scan's points as points of a GDD × power map:
// index and values [gdd, power] from the commanded GDD (0 without a stage)
// and power. The scan may sweep GDD or stage and power, angle or pulse
// area; any other swept axis must be single-valued.
func chirpPowerPoints(sc *glissv1.Scan, pts []*glissv1.Point) ([]*glissv1.Point, error) {
	gAxis, pAxis := -1, -1
	for i, ax := range sc.GetSpec().GetAxes() {
		switch ax.GetKind() {
		case glissv1.AxisKind_AXIS_KIND_GDD_PS2, glissv1.AxisKind_AXIS_KIND_STAGE_MM:
			gAxis = i
		case glissv1.AxisKind_AXIS_KIND_POWER_UW, glissv1.AxisKind_AXIS_KIND_ANGLE_DEG, glissv1.AxisKind_AXIS_KIND_PULSE_AREA_PI:
			pAxis = i
		}
	}
	if pAxis < 0 {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s sweeps no power (power, angle or pulse-area axis): nothing to analyse over power", sc.GetId())
	}
	if len(pts) == 0 {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s has no stored points yet", sc.GetId())
	}
	out := make([]*glissv1.Point, len(pts))
	for k, p := range pts {
		idx := p.GetIndex()
		for i, v := range idx {
			if i != gAxis && i != pAxis && v != 0 {
				return nil, status.Errorf(codes.FailedPrecondition, "scan %s sweeps axis %d (%s) besides chirp and power: analyse a power × chirp map", sc.GetId(), i, sweep.Column(sc.GetSpec().GetAxes()[i].GetKind()))
			}
		}
		cm := p.GetCommanded()
		if cm.PowerUw == nil {
			return nil, status.Errorf(codes.FailedPrecondition, "scan %s point %d has no commanded power", sc.GetId(), p.GetSeq())
		}
		q := &glissv1.Point{Seq: p.GetSeq(), Counts: p.GetCounts(), GateMs: p.GetGateMs(), Index: []uint32{0, idx[pAxis]}, Values: []float64{cm.GetGddPs2(), cm.GetPowerUw()}}
		if gAxis >= 0 {
			q.Index[0] = idx[gAxis]
		}
		out[k] = q
	}
	return out, nil
}

// dotModel resolves the model of a request: demo dot with overrides, and
// the area scale from the request or the scan's pulse-area calibration.
func dotModel(sc *glissv1.Scan, dm *glissv1.DotModel, field string) (model.Params, analysis.FitParams, error) {
	base, err := modelOf(dm.FwhmPs, dm.BindingMev, dm.DetuningMev)
	if err != nil {
		return base, analysis.FitParams{}, invalidField(field, "dot model: %v", err)
	}
	p := analysis.FitParams{BindingMeV: base.BindingMeV, DetuningMeV: base.DetuningMeV,
		AmplitudeCounts: dm.GetAmplitudeCounts(), BackgroundCounts: dm.GetBackgroundCounts()}
	switch {
	case dm.AreaPiPerSqrtUw != nil:
		p.AreaPiPerSqrtUW = dm.GetAreaPiPerSqrtUw()
		if !(p.AreaPiPerSqrtUW > 0) || math.IsInf(p.AreaPiPerSqrtUW, 0) {
			return base, p, invalidField(field+".area_pi_per_sqrt_uw", "%g: want > 0", p.AreaPiPerSqrtUW)
		}
	default:
		if s, ok := scanSet(sc); ok && s.PulseArea != nil {
			p.AreaPiPerSqrtUW = s.PulseArea.AreaPiPerSqrtUW
		} else {
			return base, p, invalidField(field+".area_pi_per_sqrt_uw", "missing: scan %s recorded no pulse-area calibration (run gliss calib pulse-area, or give the area scale)", sc.GetId())
		}
	}
	if math.IsNaN(p.AmplitudeCounts) || p.AmplitudeCounts < 0 || math.IsInf(p.AmplitudeCounts, 0) {
		return base, p, invalidField(field+".amplitude_counts", "%g: want ≥ 0", p.AmplitudeCounts)
	}
	if math.IsNaN(p.BackgroundCounts) || math.IsInf(p.BackgroundCounts, 0) {
		return base, p, invalidField(field+".background_counts", "%g: want finite", p.BackgroundCounts)
	}
	return base, p, nil
}

func gridOf(g [][]float64) []*glissv1.GridRow {
	out := make([]*glissv1.GridRow, len(g))
	for i, r := range g {
		out[i] = &glissv1.GridRow{Values: append([]float64(nil), r...)}
	}
	return out
}

func fitParamsPB(p analysis.FitParams) *glissv1.FitParams {
	return &glissv1.FitParams{AreaPiPerSqrtUw: p.AreaPiPerSqrtUW, BindingMev: p.BindingMeV, DetuningMev: p.DetuningMeV, AmplitudeCounts: p.AmplitudeCounts, BackgroundCounts: p.BackgroundCounts}
}

// AnalyseScan analyses the plateau robustness of a power × chirp map.
func (a *Analysis) AnalyseScan(ctx context.Context, req *glissv1.AnalyseScanRequest) (*glissv1.AnalyseScanResponse, error) {
	if f := req.GetFraction(); f != 0 && !(f > 0 && f < 1) {
		return nil, invalidField("fraction", "%g: want 0 < fraction < 1 (0 means 0.9)", f)
	}
	sc, pts, err := a.load(ctx, "id", req.GetId())
	if err != nil {
		return nil, err
	}
	ch, err := channelIndex(sc, req.GetChannel(), "channel")
	if err != nil {
		return nil, err
	}
	cp, err := chirpPowerPoints(sc, pts)
	if err != nil {
		return nil, err
	}
	m, err := analysis.MapFromPoints(cp, 0, 1, ch)
	if err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s: %v", sc.GetId(), err)
	}
	dm := req.GetModel()
	if dm == nil {
		dm = &glissv1.DotModel{}
	}
	opt := analysis.PlateauOptions{Fraction: req.GetFraction(), BackgroundCounts: dm.GetBackgroundCounts(), AmplitudeCounts: dm.GetAmplitudeCounts()}
	out := &glissv1.AnalyseScanResponse{GddPs2: m.GDDPS2, PowerUw: m.PowerUW}
	if req.GetFit() {
		base, start, err := dotModel(sc, dm, "model")
		if err != nil {
			return nil, err
		}
		bath, err := bathOf(dm.GetPhonons(), "model.phonons")
		if err != nil {
			return nil, err
		}
		fit, err := analysis.FitMap(ctx, m, analysis.MapFitOptions{Base: base, Bath: bath, Channel: analysis.ChannelXX, Start: start})
		if err != nil {
			if ctx.Err() != nil {
				return nil, toStatus(ctx.Err())
			}
			return nil, status.Errorf(codes.FailedPrecondition, "scan %s: %v", sc.GetId(), err)
		}
		out.Fit = &glissv1.MapFit{Params: fitParamsPB(fit.Params), Sigma: fitParamsPB(fit.Sigma), ChiSq: fit.ChiSq, Dof: uint32(fit.DoF), RedChiSq: fit.RedChiSq,
			Model: gridOf(fit.Model), Residuals: gridOf(fit.Residuals), Iterations: uint32(fit.Iterations), Status: fit.Status}
		opt.BackgroundCounts, opt.AmplitudeCounts = fit.Params.BackgroundCounts, fit.Params.AmplitudeCounts
	}
	rep, err := analysis.Plateaus(m, opt)
	if err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s: %v", sc.GetId(), err)
	}
	out.Fraction, out.Best, out.BestGddPs2, out.Zero, out.ZeroGddPs2 = rep.Fraction, uint32(rep.Best), rep.BestGDDPS2, uint32(rep.Zero), rep.ZeroGDDPS2
	out.PiFidelity, out.FidelityReference = rep.PiFidelity, rep.FidelityReference
	for _, c := range rep.Chirps {
		out.Chirps = append(out.Chirps, &glissv1.ChirpPlateau{GddPs2: c.GDDPS2, PlateauCounts: c.PlateauCounts, PlateauPowerUw: c.PlateauPowerUW,
			FirstMaxPowerUw: c.FirstMaxPowerUW, FirstMaxCounts: c.FirstMaxCounts, LowUw: c.LowUW, HighUw: c.HighUW,
			RangeUw: c.RangeUW, RangeDecades: c.RangeDecades, OpenLow: c.OpenLow, OpenHigh: c.OpenHigh})
	}
	return out, nil
}

// CompareScans compares two scans point by point.
func (a *Analysis) CompareScans(ctx context.Context, req *glissv1.CompareScansRequest) (*glissv1.CompareScansResponse, error) {
	sa, pa, err := a.load(ctx, "a", req.GetA())
	if err != nil {
		return nil, err
	}
	sb, pb, err := a.load(ctx, "b", req.GetB())
	if err != nil {
		return nil, err
	}
	if fmt.Sprint(sa.GetChannels()) != fmt.Sprint(sb.GetChannels()) {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s counts channels %v, scan %s %v: not comparable", sa.GetId(), sa.GetChannels(), sb.GetId(), sb.GetChannels())
	}
	var kindsA, kindsB []string
	for _, ax := range sa.GetSpec().GetAxes() {
		kindsA = append(kindsA, sweep.Column(ax.GetKind()))
	}
	for _, ax := range sb.GetSpec().GetAxes() {
		kindsB = append(kindsB, sweep.Column(ax.GetKind()))
	}
	if fmt.Sprint(kindsA) != fmt.Sprint(kindsB) {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s has axes %v, scan %s %v: not comparable point by point", sa.GetId(), kindsA, sb.GetId(), kindsB)
	}
	c, err := analysis.Compare(pa, pb, sa.GetChannels())
	if err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "%v", err)
	}
	out := &glissv1.CompareScansResponse{Matched: uint64(c.Matched), OnlyA: uint64(c.OnlyA), OnlyB: uint64(c.OnlyB), AxisColumns: kindsA}
	for _, d := range c.Channels {
		out.Channels = append(out.Channels, &glissv1.ChannelDeviation{Channel: d.Channel, Rms: d.RMS, MaxAbs: d.MaxAbs, MaxAtIndex: d.MaxAtIndex, MeanA: d.MeanA, MeanB: d.MeanB})
	}
	for _, r := range c.Rows {
		out.Rows = append(out.Rows, &glissv1.DiffRow{Index: r.Index, Values: r.Values, A: r.A, B: r.B})
	}
	return out, nil
}

// ReplayScan replays a stored scan on a simulated bench.
func (a *Analysis) ReplayScan(ctx context.Context, req *glissv1.ReplayScanRequest) (*glissv1.ReplayScanResponse, error) {
	if a.Replay == nil {
		return nil, status.Error(codes.Unimplemented, "this glissd does not replay scans")
	}
	if req.GetId() == "" {
		return nil, invalidField("id", "missing: give the scan id (gliss scan list shows them)")
	}
	sc, err := a.Store.GetScan(req.GetId())
	if err != nil {
		return nil, toStatus(err)
	}
	rep, err := a.Replay(ctx, sc)
	if err != nil {
		return nil, toStatus(err)
	}
	return &glissv1.ReplayScanResponse{Scan: rep}, nil
}

// TheoryMap computes the model map in a scan's chirp and power axes.
func (a *Analysis) TheoryMap(ctx context.Context, req *glissv1.TheoryMapRequest) (*glissv1.TheoryMapResponse, error) {
	var ch analysis.Channel
	switch req.GetChannel() {
	case "", "xx":
		ch = analysis.ChannelXX
	case "x":
		ch = analysis.ChannelX
	default:
		return nil, invalidField("channel", "%q: want \"xx\" or \"x\"", req.GetChannel())
	}
	sc, pts, err := a.load(ctx, "id", req.GetId())
	if err != nil {
		return nil, err
	}
	cp, err := chirpPowerPoints(sc, pts)
	if err != nil {
		return nil, err
	}
	m, err := analysis.MapFromPoints(cp, 0, 1, 0)
	if err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s: %v", sc.GetId(), err)
	}
	dm := req.GetModel()
	if dm == nil {
		dm = &glissv1.DotModel{}
	}
	base, p, err := dotModel(sc, dm, "model")
	if err != nil {
		return nil, err
	}
	unit := p
	unit.AmplitudeCounts, unit.BackgroundCounts = 1, 0
	bath, err := bathOf(dm.GetPhonons(), "model.phonons")
	if err != nil {
		return nil, err
	}
	y, err := analysis.TheoryMapBath(ctx, base, bath, ch, m.GDDPS2, m.PowerUW, unit)
	if err != nil {
		if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
			return nil, toStatus(err)
		}
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s: %v", sc.GetId(), err)
	}
	out := &glissv1.TheoryMapResponse{GddPs2: m.GDDPS2, PowerUw: m.PowerUW, Yield: gridOf(y), Params: fitParamsPB(p), Channel: ch.String()}
	if p.AmplitudeCounts > 0 {
		counts := make([][]float64, len(y))
		for i := range y {
			counts[i] = make([]float64, len(y[i]))
			for j, v := range y[i] {
				counts[i][j] = p.AmplitudeCounts*v + p.BackgroundCounts
			}
		}
		out.Counts = gridOf(counts)
	}
	return out, nil
}
