package rpc

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/calib"
	"github.com/gliss-lab/gliss/service/analysis"
	"github.com/gliss-lab/gliss/service/engine"
	"github.com/gliss-lab/gliss/service/sweep"
	"github.com/gliss-lab/gliss/sim/model"
	"github.com/gliss-lab/gliss/sim/phonon"
)

// CalibrationStore is what the calibration service needs of the store.
type CalibrationStore interface {
	PutCalibration(ctx context.Context, rec *glissv1.CalibrationRecord) error
	ListCalibrations(bench string) ([]*glissv1.CalibrationRecord, error)
	GetCalibration(bench string, version uint32) (*glissv1.CalibrationRecord, error)
	GetScan(id string) (*glissv1.Scan, error)
	ReadPoints(ctx context.Context, id string, from uint64, fn func(*glissv1.Point) error) error
}

// Calibrations implements gliss.v1.CalibrationService for the engine's
// bench. It owns the bench's calibration set in use: on start it applies the
// newest stored version (NewCalibrations), and each new version is stored
// first and then handed to the bench (drivers.Bench.SetCalibration), so a
// scan submitted afterwards is planned with it; scans already planned keep
// theirs. Current is the engine's calibration source.
type Calibrations struct {
	glissv1.UnimplementedCalibrationServiceServer
	Engine *engine.Engine
	Store  CalibrationStore
	// Now is the clock (nil: time.Now).
	Now func() time.Time

	mu      sync.Mutex // serialises new versions
	nominal *glissv1.CalibrationRecord
	current atomic.Pointer[glissv1.CalibrationRecord]
}

// NewCalibrations makes the service and applies the newest stored version
// of the bench's calibration, if any, to the bench.
func NewCalibrations(eng *engine.Engine, st CalibrationStore) (*Calibrations, error) {
	c := &Calibrations{Engine: eng, Store: st}
	b := eng.Bench()
	nom := b.Calibration.Set()
	nom.Version = 0
	js, err := calib.EncodeSet(nom)
	if err != nil {
		return nil, fmt.Errorf("calibration of bench %q: nominal set: %w", b.Name, err)
	}
	c.nominal = &glissv1.CalibrationRecord{Bench: b.Name, Version: 0, SetJson: string(js), Note: "nominal calibration of the bench (bench file or simulated bench)"}
	c.current.Store(c.nominal)
	latest, err := st.GetCalibration(b.Name, 0)
	switch {
	case err == nil:
		set, err := calib.DecodeSet([]byte(latest.GetSetJson()))
		if err != nil {
			return nil, fmt.Errorf("calibration of bench %q version %d: %w", b.Name, latest.GetVersion(), err)
		}
		b.SetCalibration(drivers.CalibrationFromSet(set, b.Calibration))
		c.current.Store(latest)
	case isNotFound(err):
	default:
		return nil, fmt.Errorf("calibration of bench %q: %w", b.Name, err)
	}
	return c, nil
}

func isNotFound(err error) bool { return status.Code(toStatus(err)) == codes.NotFound }

// Current is the record of the calibration set in use.
func (c *Calibrations) Current() *glissv1.CalibrationRecord { return c.current.Load() }

func (c *Calibrations) now() time.Time {
	if c.Now != nil {
		return c.Now()
	}
	return time.Now()
}

// GetCalibration returns the set in use or one version.
func (c *Calibrations) GetCalibration(ctx context.Context, req *glissv1.GetCalibrationRequest) (*glissv1.CalibrationRecord, error) {
	if req.Version == nil {
		return c.Current(), nil
	}
	if req.GetVersion() == 0 {
		return c.nominal, nil
	}
	rec, err := c.Store.GetCalibration(c.Engine.Bench().Name, req.GetVersion())
	return rec, toStatus(err)
}

// ListCalibrations lists the versions newest first, the nominal one last.
func (c *Calibrations) ListCalibrations(ctx context.Context, req *glissv1.ListCalibrationsRequest) (*glissv1.ListCalibrationsResponse, error) {
	list, err := c.Store.ListCalibrations(c.Engine.Bench().Name)
	if err != nil {
		return nil, toStatus(err)
	}
	return &glissv1.ListCalibrationsResponse{Calibrations: append(list, c.nominal), CurrentVersion: c.Current().GetVersion()}, nil
}

// setPatch is what PutCalibration accepts: parts of a calib.Set. Schema,
// version, created and note are accepted (so that a shown set can be put
// back) and ignored.
type setPatch struct {
	Schema     int               `json:"schema"`
	Version    int               `json:"version"`
	Created    json.RawMessage   `json:"created"`
	Note       string            `json:"note"`
	Stretcher  *calib.Stretcher  `json:"stretcher"`
	Attenuator *calib.Attenuator `json:"attenuator"`
	PulseArea  *calib.PulseArea  `json:"pulse_area"`
}

// maxPutBytes bounds set_json.
const maxPutBytes = 1 << 20

// PutCalibration validates the parts given and stores a new version.
func (c *Calibrations) PutCalibration(ctx context.Context, req *glissv1.PutCalibrationRequest) (*glissv1.CalibrationRecord, error) {
	if len(req.GetSetJson()) > maxPutBytes {
		return nil, invalidField("set_json", "%d bytes: allowed ≤ %d", len(req.GetSetJson()), maxPutBytes)
	}
	p, err := decodeSetPatch([]byte(req.GetSetJson()))
	if err != nil {
		return nil, invalidField("set_json", "%v", err)
	}
	if p.Stretcher == nil && p.Attenuator == nil && p.PulseArea == nil {
		return nil, invalidField("set_json", "no calibration given: set one or more of stretcher, attenuator, pulse_area")
	}
	var bad []error
	var fields []string
	if p.Stretcher != nil {
		if err := p.Stretcher.Validate(); err != nil {
			bad, fields = append(bad, err), append(fields, "set_json.stretcher")
		}
	}
	if p.Attenuator != nil {
		if err := p.Attenuator.Validate(); err != nil {
			bad, fields = append(bad, err), append(fields, "set_json.attenuator")
		}
	}
	if p.PulseArea != nil {
		if err := p.PulseArea.Validate(); err != nil {
			bad, fields = append(bad, err), append(fields, "set_json.pulse_area")
		}
	}
	if len(bad) > 0 {
		return nil, invalidFields(fields, bad)
	}
	return c.put(ctx, func(s *calib.Set) {
		if p.Stretcher != nil {
			s.Stretcher = p.Stretcher
		}
		if p.Attenuator != nil {
			s.Attenuator = p.Attenuator
		}
		if p.PulseArea != nil {
			s.PulseArea = p.PulseArea
		}
	}, req.GetNote())
}

// decodeSetPatch reads the parts of a calibration set a client puts: one
// JSON object of the calib.Set keys, no unknown keys, no trailing data.
func decodeSetPatch(b []byte) (setPatch, error) {
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	var p setPatch
	if err := dec.Decode(&p); err != nil {
		return setPatch{}, fmt.Errorf("not a calibration set: %v (keys: stretcher, attenuator, pulse_area)", err)
	}
	if _, err := dec.Token(); err != io.EOF {
		return setPatch{}, errors.New("trailing data after the JSON object")
	}
	return p, nil
}

func invalidFields(fields []string, errs []error) error {
	fe := make([]fieldErr, len(fields))
	for i := range fields {
		fe[i] = fieldErr{fields[i], errs[i].Error()}
	}
	return invalidMany(fe)
}

// put stores a new version: the set in use changed by edit, with note.
func (c *Calibrations) put(ctx context.Context, edit func(*calib.Set), note string) (*glissv1.CalibrationRecord, error) {
	if len(note) > 2000 {
		return nil, invalidField("note", "%d bytes: allowed ≤ 2000", len(note))
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	b := c.Engine.Bench()
	cur := b.CurrentCalibration()
	set := cur.Set()
	edit(&set)
	set.Version = int(c.Current().GetVersion()) + 1
	now := c.now().UTC()
	set.Created = now
	set.Note = note
	js, err := calib.EncodeSet(set)
	if err != nil {
		return nil, status.Error(codes.InvalidArgument, err.Error())
	}
	rec := &glissv1.CalibrationRecord{Bench: b.Name, Version: uint32(set.Version), CreatedAt: timestamppb.New(now), SetJson: string(js), Note: note}
	if err := c.Store.PutCalibration(ctx, rec); err != nil {
		return nil, toStatus(err)
	}
	b.SetCalibration(drivers.CalibrationFromSet(set, b.Calibration))
	c.current.Store(rec)
	return rec, nil
}

// Limits of the attenuator procedure.
const (
	maxCalibrationReadings = 1000
	maxCalibrationSettleMS = 60_000
)

// RunAttenuatorCalibration sweeps the angle, reads the power meter, fits
// the law and stores it.
func (c *Calibrations) RunAttenuatorCalibration(ctx context.Context, req *glissv1.RunAttenuatorCalibrationRequest) (*glissv1.AttenuatorCalibrationResult, error) {
	b := c.Engine.Bench()
	att, pm := b.Attenuator(), b.PowerMeter()
	if att == nil || pm == nil {
		return nil, status.Errorf(codes.FailedPrecondition, "bench %q: the attenuator calibration needs an attenuator and a power meter", b.Name)
	}
	lim := b.ByRole(drivers.RoleAttenuator).Limits
	from, to, n := req.GetFromDeg(), req.GetToDeg(), req.GetCount()
	if from == 0 && to == 0 {
		from, to = 0, 90
	}
	if n == 0 {
		n = 46
	}
	var fe []fieldErr
	for _, f := range []struct {
		name string
		v    float64
	}{{"from_deg", from}, {"to_deg", to}} {
		if math.IsNaN(f.v) || f.v < lim.AngleMinDeg || f.v > lim.AngleMaxDeg {
			fe = append(fe, fieldErr{f.name, fmt.Sprintf("%g°: outside the attenuator's range %g–%g°", f.v, lim.AngleMinDeg, lim.AngleMaxDeg)})
		}
	}
	if n < 4 || n > maxCalibrationReadings {
		fe = append(fe, fieldErr{"count", fmt.Sprintf("%d readings: allowed 4 to %d", n, maxCalibrationReadings)})
	}
	if s := req.GetSettleMs(); math.IsNaN(s) || s < 0 || s > maxCalibrationSettleMS {
		fe = append(fe, fieldErr{"settle_ms", fmt.Sprintf("%g ms: allowed 0 to %d", s, maxCalibrationSettleMS)})
	}
	law := req.GetLaw()
	if law != glissv1.AttenuatorLaw_ATTENUATOR_LAW_UNSPECIFIED && law != glissv1.AttenuatorLaw_ATTENUATOR_LAW_MALUS && law != glissv1.AttenuatorLaw_ATTENUATOR_LAW_ND_WHEEL {
		fe = append(fe, fieldErr{"law", fmt.Sprintf("unknown law %v (MALUS or ND_WHEEL)", law)})
	}
	if len(req.GetNote()) > 2000 {
		fe = append(fe, fieldErr{"note", fmt.Sprintf("%d bytes: allowed ≤ 2000", len(req.GetNote()))})
	}
	if len(fe) > 0 {
		return nil, invalidMany(fe)
	}
	if law == glissv1.AttenuatorLaw_ATTENUATOR_LAW_ND_WHEEL && (from >= to) {
		return nil, invalidField("to_deg", "%g°: an ND-wheel sweep needs from_deg < to_deg (the graded sector)", to)
	}
	angles := make([]float64, n)
	for i := range angles {
		angles[i] = from + (to-from)*float64(i)/float64(n-1)
	}
	angles[n-1] = to
	settle := b.Scale(time.Duration(req.GetSettleMs() * float64(time.Millisecond)))
	powers := make([]float64, n)
	err := c.Engine.Manual(ctx, func(ctx context.Context, b *drivers.Bench) error {
		for i, deg := range angles {
			if err := att.SetAngleDeg(ctx, deg); err != nil {
				return fmt.Errorf("attenuator calibration: reading %d: set %.3f°: %w", i, deg, err)
			}
			if settle > 0 {
				t := time.NewTimer(settle)
				select {
				case <-ctx.Done():
					t.Stop()
					return ctx.Err()
				case <-t.C:
				}
			}
			p, err := pm.PowerUW(ctx)
			if err != nil {
				return fmt.Errorf("attenuator calibration: reading %d at %.3f°: power meter: %w", i, deg, err)
			}
			powers[i] = p
		}
		return nil
	})
	if err != nil {
		return nil, toStatus(err)
	}
	res := &glissv1.AttenuatorCalibrationResult{AnglesDeg: angles, PowersUw: powers}
	var fitted calib.Attenuator
	var stats calib.FitStats
	var fitJSON []byte
	switch law {
	case glissv1.AttenuatorLaw_ATTENUATOR_LAW_ND_WHEEL:
		f, err := calib.FitNDWheel(angles, powers)
		if err != nil {
			return nil, status.Errorf(codes.FailedPrecondition, "%v", err)
		}
		nd := f.NDWheel
		fitted, stats = calib.Attenuator{ND: &nd}, f.FitStats
		fitJSON, _ = json.Marshal(f)
	default:
		f, err := calib.FitMalus(angles, powers)
		if err != nil {
			return nil, status.Errorf(codes.FailedPrecondition, "%v", err)
		}
		m := f.Malus
		fitted, stats = calib.Attenuator{Malus: &m}, f.FitStats
		fitJSON, _ = json.Marshal(f)
	}
	if err := fitted.Validate(); err != nil {
		return nil, status.Errorf(codes.FailedPrecondition, "attenuator calibration: the fit is not a usable law: %v", err)
	}
	res.ResidualsUw, res.RmsResidualUw, res.MaxResidualUw, res.FitJson = stats.Residuals, stats.RMS, stats.MaxAbs, string(fitJSON)
	if req.GetDryRun() {
		res.Calibration = c.Current()
		return res, nil
	}
	note := req.GetNote()
	if note == "" {
		note = fmt.Sprintf("attenuator calibration: %d readings %g–%g°, rms residual %.3g µW", n, from, to, stats.RMS)
	}
	rec, err := c.put(ctx, func(s *calib.Set) { s.Attenuator = &fitted }, note)
	if err != nil {
		return nil, err
	}
	res.Calibration = rec
	return res, nil
}

// modelOf is the demo dot with the request's overrides.
func modelOf(fwhm, binding, detuning *float64) (model.Params, error) {
	m := model.DemoParams()
	if fwhm != nil {
		m.FWHMPS = *fwhm
	}
	if binding != nil {
		m.BindingMeV = *binding
	}
	if detuning != nil {
		m.DetuningMeV = *detuning
	}
	if err := m.Validate(); err != nil {
		return m, err
	}
	return m, nil
}

// bathOf converts the request's phonons (nil: none).
func bathOf(p *glissv1.Phonons, field string) (*phonon.Bath, error) {
	if p == nil {
		return nil, nil
	}
	b := &phonon.Bath{AlphaPS2: p.GetAlphaPs2(), CutoffMeV: p.GetCutoffMev(), TemperatureK: p.GetTemperatureK()}
	if err := b.Validate(); err != nil {
		return nil, invalidField(field, "%v", err)
	}
	return b, nil
}

// zeroChirpPS2 is the largest |GDD| a pulse-area calibration sweep may have
// (a small fraction of the TL pulse's GDD scale; common practice, no
// published source).
const zeroChirpPS2 = 0.05

// CalibratePulseArea fits the pulse-area calibration to a stored sweep.
func (c *Calibrations) CalibratePulseArea(ctx context.Context, req *glissv1.CalibratePulseAreaRequest) (*glissv1.PulseAreaCalibrationResult, error) {
	if req.GetScanId() == "" {
		return nil, invalidField("scan_id", "missing: give the id of a zero-chirp power sweep")
	}
	maxArea := req.GetMaxAreaPi()
	if maxArea == 0 {
		maxArea = 10
	}
	if math.IsNaN(maxArea) || maxArea < 1 || maxArea > model.MaxAreaPi {
		return nil, invalidField("max_area_pi", "%g π: allowed 1 to %g", req.GetMaxAreaPi(), model.MaxAreaPi)
	}
	base, err := modelOf(req.FwhmPs, req.BindingMev, req.DetuningMev)
	if err != nil {
		return nil, invalidField("fwhm_ps", "dot model: %v", err)
	}
	sc, err := c.Store.GetScan(req.GetScanId())
	if err != nil {
		return nil, toStatus(err)
	}
	ch, err := channelIndex(sc, req.GetChannel(), "channel")
	if err != nil {
		return nil, err
	}
	var powers, counts []float64
	err = c.Store.ReadPoints(ctx, sc.GetId(), 0, func(p *glissv1.Point) error {
		cm := p.GetCommanded()
		if cm.GddPs2 != nil && math.Abs(cm.GetGddPs2()) > zeroChirpPS2 {
			return status.Errorf(codes.FailedPrecondition, "scan %s point %d is at GDD %g ps²: the pulse-area calibration needs a sweep at zero chirp (|GDD| ≤ %g ps²)", sc.GetId(), p.GetSeq(), cm.GetGddPs2(), zeroChirpPS2)
		}
		if cm.PowerUw == nil {
			return status.Errorf(codes.FailedPrecondition, "scan %s point %d has no commanded power: the pulse-area calibration needs a power (or pulse-area) sweep", sc.GetId(), p.GetSeq())
		}
		if len(p.GetCounts()) <= ch {
			return status.Errorf(codes.FailedPrecondition, "scan %s point %d has %d count channels", sc.GetId(), p.GetSeq(), len(p.GetCounts()))
		}
		powers = append(powers, cm.GetPowerUw())
		counts = append(counts, float64(p.GetCounts()[ch]))
		return nil
	})
	if err != nil {
		return nil, toStatus(err)
	}
	if len(powers) < 5 {
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s has %d stored points: the pulse-area fit needs at least 5", sc.GetId(), len(powers))
	}
	bath, err := bathOf(req.GetPhonons(), "phonons")
	if err != nil {
		return nil, err
	}
	fit, err := analysis.CalibratePulseAreaBath(ctx, base, bath, powers, counts, maxArea)
	if err != nil {
		if ctx.Err() != nil {
			return nil, toStatus(ctx.Err())
		}
		return nil, status.Errorf(codes.FailedPrecondition, "scan %s: %v", sc.GetId(), err)
	}
	fj, _ := json.Marshal(fit)
	res := &glissv1.PulseAreaCalibrationResult{
		AreaPiPerSqrtUw: fit.AreaPiPerSqrtUW, SigmaAreaPiPerSqrtUw: fit.SigmaAreaPiPerSqrtUW,
		PiPowerUw: fit.PiPowerUW, SigmaPiPowerUw: fit.SigmaPiPowerUW, RedChiSq: fit.RedChiSq, FitJson: string(fj),
	}
	if req.GetDryRun() {
		res.Calibration = c.Current()
		return res, nil
	}
	note := req.GetNote()
	if note == "" {
		note = fmt.Sprintf("pulse area from scan %s: π pulse at %.4g ± %.2g µW", sc.GetId(), fit.PiPowerUW, fit.SigmaPiPowerUW)
	}
	pa := fit.PulseArea
	rec, err := c.put(ctx, func(s *calib.Set) { s.PulseArea = &pa }, note)
	if err != nil {
		return nil, err
	}
	res.Calibration = rec
	return res, nil
}

// channelIndex finds a counter channel of a scan by name (default "xx").
func channelIndex(sc *glissv1.Scan, name, field string) (int, error) {
	if name == "" {
		name = "xx"
	}
	for i, c := range sc.GetChannels() {
		if c == name {
			return i, nil
		}
	}
	return 0, invalidField(field, "%q: scan %s has channels %v", name, sc.GetId(), sc.GetChannels())
}

// fieldErr is one field violation.
type fieldErr struct{ field, msg string }

func invalidMany(fe []fieldErr) error {
	fields := make([]sweep.FieldError, len(fe))
	for i, f := range fe {
		fields[i] = sweep.FieldError{Field: f.field, Msg: f.msg}
	}
	return invalid(fields...)
}
