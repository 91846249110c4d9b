package cli

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"strings"
	"sync"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/gliss-lab/gliss/client"
)

// connFlags are the connection flags serverFlag adds beside --server.
type connFlags struct {
	server    *string
	tokenFile *string
	caCert    *string
	envToken  string
}

// connSets remembers the connection flags of the latest flag sets, so that
// dial(ctx, addr) finds the token and CA flags parsed with that --server.
var (
	connMu   sync.Mutex
	connSets []*connFlags
)

const maxConnSets = 64

// serverFlag adds --server (default $GLISS_SERVER, else 127.0.0.1:7355),
// --token-file (default $GLISS_TOKEN_FILE; the token itself may be given
// in $GLISS_TOKEN) and --ca-cert (default $GLISS_CA_CERT).
func serverFlag(fs *flag.FlagSet, env *Env) *string {
	def := env.Getenv("GLISS_SERVER")
	if def == "" {
		def = client.DefaultAddr
	}
	cf := &connFlags{
		server:    fs.String("server", def, "glissd address host:port (env GLISS_SERVER)"),
		tokenFile: fs.String("token-file", env.Getenv("GLISS_TOKEN_FILE"), "file holding your bearer token for glissd (env GLISS_TOKEN_FILE; or give the token itself in GLISS_TOKEN)"),
		caCert:    fs.String("ca-cert", env.Getenv("GLISS_CA_CERT"), "PEM certificate to trust for glissd's TLS: connect over TLS (env GLISS_CA_CERT)"),
		envToken:  strings.TrimSpace(env.Getenv("GLISS_TOKEN")),
	}
	connMu.Lock()
	connSets = append(connSets, cf)
	if len(connSets) > maxConnSets {
		connSets = append(connSets[:0:0], connSets[len(connSets)-maxConnSets:]...)
	}
	connMu.Unlock()
	return cf.server
}

// connFor returns the connection flags parsed with --server addr (the
// latest flag set whose --server is addr).
func connFor(addr string) *connFlags {
	connMu.Lock()
	defer connMu.Unlock()
	for i := len(connSets) - 1; i >= 0; i-- {
		if *connSets[i].server == addr {
			return connSets[i]
		}
	}
	return nil
}

// dialOptions turns the connection flags into client options.
func (cf *connFlags) dialOptions() ([]client.DialOption, error) {
	var opts []client.DialOption
	switch {
	case cf == nil:
	case *cf.tokenFile != "":
		tok, err := client.ReadToken(*cf.tokenFile)
		if err != nil {
			return nil, &UsageError{Msg: "--token-file: " + err.Error()}
		}
		opts = append(opts, client.WithToken(tok))
	case cf.envToken != "":
		opts = append(opts, client.WithToken(cf.envToken))
	}
	if cf != nil && *cf.caCert != "" {
		opts = append(opts, client.WithTLS(*cf.caCert))
	}
	return opts, nil
}

func dial(ctx context.Context, addr string) (*client.Client, error) {
	opts, err := connFor(addr).dialOptions()
	if err != nil {
		return nil, err
	}
	return client.Dial(ctx, addr, opts...)
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
	case codes.Unauthenticated, codes.PermissionDenied:
		return fmt.Errorf("glissd refused: %s", st.Message())
	}
	return errors.New(st.Message())
}
