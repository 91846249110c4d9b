package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"strings"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/gliss-lab/gliss/client"
)

// serverFlag adds --server (default $GLISS_SERVER, else 127.0.0.1:7355).
func serverFlag(fs *flag.FlagSet, env *Env) *string {
	def := env.Getenv("GLISS_SERVER")
	if def == "" {
		def = client.DefaultAddr
	}
	return fs.String("server", def, "glissd address host:port (env GLISS_SERVER)")
}

func dial(ctx context.Context, addr string) (*client.Client, error) {
	return client.Dial(ctx, addr)
}

// rpcError turns a gRPC error into a message a person can act on. Field
// violations are mapped back to the flags that set them (fieldFlags maps a
// field prefix such as "spec.axes[0]" to "--gdd-ps2 VALUE"); invalid input is
// a UsageError (exit status 2).
func rpcError(err error, fieldFlags map[string]string) error {
	if err == nil {
		return nil
	}
	st, ok := status.FromError(err)
	if !ok {
		return err
	}
	var lines []string
	for _, d := range st.Details() {
		br, ok := d.(*errdetails.BadRequest)
		if !ok {
			continue
		}
		for _, v := range br.GetFieldViolations() {
			name := v.GetField()
			best := ""
			for prefix := range fieldFlags {
				if strings.HasPrefix(name, prefix) && len(prefix) > len(best) {
					best = prefix
				}
			}
			if best != "" {
				name = fieldFlags[best]
			}
			lines = append(lines, fmt.Sprintf("%s: %s", name, v.GetDescription()))
		}
	}
	switch st.Code() {
	case codes.InvalidArgument:
		if len(lines) == 0 {
			lines = []string{st.Message()}
		}
		return &UsageError{Msg: strings.Join(lines, "\n")}
	case codes.NotFound:
		return fmt.Errorf("%s (gliss scan list shows the scans)", st.Message())
	case codes.FailedPrecondition:
		return fmt.Errorf("%s", st.Message())
	case codes.Unavailable:
		return fmt.Errorf("glissd unavailable: %s", st.Message())
	}
	return errors.New(st.Message())
}
