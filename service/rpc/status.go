// Package rpc holds glissd's gRPC handlers: thin adapters from the
// generated gliss.v1 services to the scan engine and the bench, which tests
// can also call directly. Errors become status codes that tell the caller
// what to do: InvalidArgument (with google.rpc.BadRequest naming the field),
// NotFound, FailedPrecondition, Unavailable.
package rpc

import (
	"context"
	"errors"
	"fmt"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/engine"
	"github.com/gliss-lab/gliss/service/store"
	"github.com/gliss-lab/gliss/service/sweep"
)

// invalid builds an InvalidArgument status with one BadRequest violation per field.
func invalid(fields ...sweep.FieldError) error {
	msg := "invalid request"
	if len(fields) > 0 {
		msg = (&sweep.Invalid{Fields: fields}).Error()
	}
	st := status.New(codes.InvalidArgument, msg)
	br := &errdetails.BadRequest{}
	for _, f := range fields {
		br.FieldViolations = append(br.FieldViolations, &errdetails.BadRequest_FieldViolation{Field: f.Field, Description: f.Msg})
	}
	if d, err := st.WithDetails(br); err == nil {
		return d.Err()
	}
	return st.Err()
}

func invalidField(field, format string, a ...any) error {
	return invalid(sweep.FieldError{Field: field, Msg: fmt.Sprintf(format, a...)})
}

// toStatus maps engine, store and driver errors to gRPC status errors.
func toStatus(err error) error {
	if err == nil {
		return nil
	}
	if _, ok := status.FromError(err); ok {
		return err
	}
	var inv *sweep.Invalid
	var busy *engine.BusyError
	switch {
	case errors.As(err, &inv):
		return invalid(inv.Fields...)
	case errors.As(err, &busy):
		st := status.New(codes.FailedPrecondition, busy.Error())
		if d, e := st.WithDetails(&errdetails.PreconditionFailure{Violations: []*errdetails.PreconditionFailure_Violation{{
			Type: "BENCH_HELD", Subject: "scan/" + busy.ScanID, Description: busy.Error(),
		}}}); e == nil {
			return d.Err()
		}
		return st.Err()
	case errors.Is(err, engine.ErrNotFound), errors.Is(err, store.ErrNotFound):
		return status.Error(codes.NotFound, err.Error())
	case errors.Is(err, engine.ErrState):
		return status.Error(codes.FailedPrecondition, err.Error())
	case errors.Is(err, store.ErrInvalid):
		return status.Error(codes.InvalidArgument, err.Error())
	case errors.Is(err, drivers.ErrLimit):
		return status.Error(codes.InvalidArgument, err.Error())
	case errors.Is(err, drivers.ErrUnavailable):
		return status.Error(codes.Unavailable, err.Error())
	case errors.Is(err, context.Canceled):
		return status.Error(codes.Canceled, err.Error())
	case errors.Is(err, context.DeadlineExceeded):
		return status.Error(codes.DeadlineExceeded, err.Error())
	case errors.Is(err, store.ErrClosed):
		return status.Error(codes.Unavailable, err.Error())
	}
	return status.Error(codes.Internal, err.Error())
}
