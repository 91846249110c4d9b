package main

import (
	"context"
	"errors"

	"github.com/gliss-lab/gliss/drivers"
)

// openBenchFile opens a bench file. Replaced when the bench-file loader lands.
func openBenchFile(ctx context.Context, path string) (*drivers.Bench, error) {
	return nil, errors.New("bench files are not supported by this build yet")
}
