package rpc

import (
	"context"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/service/engine"
	"github.com/gliss-lab/gliss/service/store"
)

// Scans implements gliss.v1.ScanService over an engine.
type Scans struct {
	glissv1.UnimplementedScanServiceServer
	Engine *engine.Engine
	// SharedEncoding encodes each point event once for all its watchers;
	// it needs the server to run with ServerCodec.
	SharedEncoding bool
	// Route, when set, names the controller of a scan that Engine does not
	// run (a replay on its own simulated bench): pause, resume and cancel
	// go there. nil from Route: Engine.
	Route func(id string) ScanControl

	events eventCache
}

// ScanControl is what pause, resume and cancel need of an engine.
type ScanControl interface {
	Pause(ctx context.Context, id, reason string) (*glissv1.Scan, error)
	Resume(ctx context.Context, id string) (*glissv1.Scan, error)
	Cancel(ctx context.Context, id, reason string) (*glissv1.Scan, error)
}

// control is the engine that controls scan id.
func (s *Scans) control(id string) ScanControl {
	if s.Route != nil {
		if c := s.Route(id); c != nil {
			return c
		}
	}
	return s.Engine
}

func needID(id string) error {
	if id == "" {
		return invalidField("id", "missing: give the scan id (gliss scan list shows them)")
	}
	return nil
}

// SubmitScan validates and queues a scan (or only previews it).
func (s *Scans) SubmitScan(ctx context.Context, req *glissv1.SubmitScanRequest) (*glissv1.SubmitScanResponse, error) {
	if req.GetValidateOnly() {
		_, pv, err := s.Engine.Validate(req.GetSpec())
		if err != nil {
			return nil, toStatus(err)
		}
		return &glissv1.SubmitScanResponse{Scan: &glissv1.Scan{Spec: req.GetSpec(), Preview: pv, Bench: s.Engine.Bench().Name}}, nil
	}
	sc, err := s.Engine.Submit(ctx, req.GetSpec())
	if err != nil {
		return nil, toStatus(err)
	}
	return &glissv1.SubmitScanResponse{Scan: sc}, nil
}

// GetScan returns one scan.
func (s *Scans) GetScan(ctx context.Context, req *glissv1.GetScanRequest) (*glissv1.Scan, error) {
	if err := needID(req.GetId()); err != nil {
		return nil, err
	}
	sc, err := s.Engine.Get(req.GetId())
	return sc, toStatus(err)
}

// ListScans lists scans newest first.
func (s *Scans) ListScans(ctx context.Context, req *glissv1.ListScansRequest) (*glissv1.ListScansResponse, error) {
	if req.GetPageSize() > 1000 {
		return nil, invalidField("page_size", "%d: allowed 1 to 1000 (0 means 50)", req.GetPageSize())
	}
	size := int(req.GetPageSize())
	if size == 0 {
		size = 50
	}
	scans, next, err := s.Engine.List(store.ListFilter{PageSize: size, PageToken: req.GetPageToken(), States: req.GetStates(), NameContains: req.GetNameContains()})
	if err != nil {
		return nil, toStatus(err)
	}
	return &glissv1.ListScansResponse{Scans: scans, NextPageToken: next}, nil
}

// WatchScan streams a scan's events.
func (s *Scans) WatchScan(req *glissv1.WatchScanRequest, stream glissv1.ScanService_WatchScanServer) error {
	if err := needID(req.GetId()); err != nil {
		return err
	}
	s.events.join(req.GetId())
	defer s.events.leave(req.GetId())
	send := func(ev *glissv1.ScanEvent) error {
		if p := ev.GetPoint(); p != nil && s.SharedEncoding {
			b, err := s.events.encoded(p)
			if err != nil {
				return err
			}
			return stream.SendMsg(&preEncoded{b: b})
		}
		return stream.Send(ev)
	}
	return toStatus(s.Engine.Watch(stream.Context(), req.GetId(), req.GetFromSeq(), send))
}

// ReadPoints streams stored points.
func (s *Scans) ReadPoints(req *glissv1.ReadPointsRequest, stream glissv1.ScanService_ReadPointsServer) error {
	if err := needID(req.GetId()); err != nil {
		return err
	}
	return toStatus(s.Engine.ReadPoints(stream.Context(), req.GetId(), req.GetFromSeq(), req.GetLimit(), stream.Send))
}

// PauseScan pauses after the current point.
func (s *Scans) PauseScan(ctx context.Context, req *glissv1.PauseScanRequest) (*glissv1.Scan, error) {
	if err := needID(req.GetId()); err != nil {
		return nil, err
	}
	sc, err := s.control(req.GetId()).Pause(ctx, req.GetId(), req.GetReason())
	return sc, toStatus(err)
}

// ResumeScan continues a paused or interrupted scan.
func (s *Scans) ResumeScan(ctx context.Context, req *glissv1.ResumeScanRequest) (*glissv1.Scan, error) {
	if err := needID(req.GetId()); err != nil {
		return nil, err
	}
	sc, err := s.control(req.GetId()).Resume(ctx, req.GetId())
	return sc, toStatus(err)
}

// CancelScan stops a scan after the current point.
func (s *Scans) CancelScan(ctx context.Context, req *glissv1.CancelScanRequest) (*glissv1.Scan, error) {
	if err := needID(req.GetId()); err != nil {
		return nil, err
	}
	sc, err := s.control(req.GetId()).Cancel(ctx, req.GetId(), req.GetReason())
	return sc, toStatus(err)
}
