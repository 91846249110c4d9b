package daemon

import (
	"context"

	"google.golang.org/grpc"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/service/engine"
	"github.com/gliss-lab/gliss/service/store"
)

// registerServices registers the gRPC services beyond BenchService and
// ScanService (calibration, analysis, replay) on srv. It returns the stop
// functions the daemon calls, in order, after the engine has stopped and
// before the store closes.
func registerServices(ctx context.Context, srv *grpc.Server, eng *engine.Engine, st *store.Store, b *drivers.Bench, cfg Config) ([]func(context.Context) error, error) {
	return nil, nil
}
