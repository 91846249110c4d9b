package main

import (
	"context"
	"log/slog"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile"

	// Drivers a bench file may name register themselves.
	_ "github.com/gliss-lab/gliss/drivers/lineproto"
	_ "github.com/gliss-lab/gliss/sim/bench"
)

// benchOpener opens a bench file, recording every transaction in recordDir when set.
func benchOpener(recordDir string, log *slog.Logger) func(ctx context.Context, path string) (*drivers.Bench, error) {
	return func(ctx context.Context, path string) (*drivers.Bench, error) {
		return benchfile.Load(ctx, path, benchfile.Options{RecordDir: recordDir, Logger: log})
	}
}
