package rpc

import (
	"context"

	"google.golang.org/protobuf/types/known/timestamppb"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/service/store"
)

// AuditLister is what the audit service reads: the store.
type AuditLister interface {
	ListAudit(f store.AuditFilter) ([]store.AuditEntry, string, error)
}

// Audit implements gliss.v1.AuditService over the store's audit log.
type Audit struct {
	glissv1.UnimplementedAuditServiceServer
	Store AuditLister
}

// ListAudit returns audit entries newest first.
func (a *Audit) ListAudit(ctx context.Context, req *glissv1.ListAuditRequest) (*glissv1.ListAuditResponse, error) {
	if req.GetPageSize() > 1000 {
		return nil, invalidField("page_size", "%d: allowed 1 to 1000 (0 means 50)", req.GetPageSize())
	}
	size := int(req.GetPageSize())
	if size == 0 {
		size = 50
	}
	entries, next, err := a.Store.ListAudit(store.AuditFilter{PageSize: size, PageToken: req.GetPageToken()})
	if err != nil {
		return nil, toStatus(err)
	}
	out := &glissv1.ListAuditResponse{NextPageToken: next, Entries: make([]*glissv1.AuditEntry, 0, len(entries))}
	for _, e := range entries {
		out.Entries = append(out.Entries, &glissv1.AuditEntry{At: timestamppb.New(e.At), Who: e.Who, Method: e.Method, Target: e.Target, Outcome: e.Outcome})
	}
	return out, nil
}
