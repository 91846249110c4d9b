// Package client is the Go client library of glissd: Dial a daemon, submit
// scans with typed helpers, and follow them with iterators.
//
//	c, err := client.Dial(ctx, "127.0.0.1:7355")
//	sc, err := c.Submit(ctx, client.MapSpec(client.Range(-20, 20, 41), client.Range(0.05, 100, 51), client.Options{GateMS: 100}))
//	for ev, err := range c.Watch(ctx, sc.Id, 0) { ... }
package client

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"io"
	"iter"
	"net"
	"os"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/keepalive"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

// DefaultAddr is where glissd listens by default.
const DefaultAddr = "127.0.0.1:7355"

// Client talks to one glissd.
type Client struct {
	conn  *grpc.ClientConn
	Scans glissv1.ScanServiceClient
	Bench glissv1.BenchServiceClient
	Audit glissv1.AuditServiceClient
}

type dialOptions struct {
	grpcOpts []grpc.DialOption
	check    bool
	timeout  time.Duration
	token    string
	tlsConf  *tls.Config
	caFile   string
}

// DialOption configures Dial.
type DialOption func(*dialOptions)

// WithGRPCOptions adds raw grpc dial options (credentials, interceptors).
func WithGRPCOptions(o ...grpc.DialOption) DialOption {
	return func(d *dialOptions) { d.grpcOpts = append(d.grpcOpts, o...) }
}

// WithToken sends a bearer token from glissd's token file with every call.
// Beyond loopback it needs TLS (WithTLS): a token is never sent in clear
// over a network.
func WithToken(token string) DialOption {
	return func(d *dialOptions) { d.token = strings.TrimSpace(token) }
}

// WithTLS connects over TLS, trusting the PEM certificate(s) in caFile (the
// daemon's certificate, or the authority that signed it). An empty caFile
// trusts the system's authorities.
func WithTLS(caFile string) DialOption {
	return func(d *dialOptions) {
		d.caFile = caFile
		if d.tlsConf == nil {
			d.tlsConf = &tls.Config{MinVersion: tls.VersionTLS12}
		}
	}
}

// WithTLSConfig connects over TLS with the given configuration.
func WithTLSConfig(c *tls.Config) DialOption {
	return func(d *dialOptions) { d.tlsConf, d.caFile = c, "" }
}

// ReadToken reads a token file for WithToken: the first line that is not
// blank and not a comment (#), trimmed.
func ReadToken(path string) (string, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return "", fmt.Errorf("token file: %w", err)
	}
	for _, line := range strings.Split(string(data), "\n") {
		line = strings.TrimSpace(line)
		if line != "" && !strings.HasPrefix(line, "#") {
			return line, nil
		}
	}
	return "", fmt.Errorf("token file %s: no token in it (one line with the token)", path)
}

// bearerToken is the per-call credential of WithToken.
type bearerToken struct {
	token  string
	secure bool // required transport security (false only on loopback)
}

func (b bearerToken) GetRequestMetadata(ctx context.Context, uri ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + b.token}, nil
}

func (b bearerToken) RequireTransportSecurity() bool { return b.secure }

// isLoopback reports whether host:port names this machine only.
func isLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// WithoutHealthCheck skips the health check Dial makes by default.
func WithoutHealthCheck() DialOption { return func(d *dialOptions) { d.check = false } }

// WithHealthTimeout sets how long Dial waits for the daemon (default 5 s).
func WithHealthTimeout(t time.Duration) DialOption { return func(d *dialOptions) { d.timeout = t } }

// Dial connects to glissd at addr and checks, through gRPC health, that it serves.
func Dial(ctx context.Context, addr string, opts ...DialOption) (*Client, error) {
	if addr == "" {
		addr = DefaultAddr
	}
	d := dialOptions{check: true, timeout: 5 * time.Second}
	for _, o := range opts {
		o(&d)
	}
	transport := insecure.NewCredentials()
	if d.tlsConf != nil {
		conf := d.tlsConf.Clone()
		if d.caFile != "" {
			pem, err := os.ReadFile(d.caFile)
			if err != nil {
				return nil, fmt.Errorf("CA certificate: %w", err)
			}
			pool := x509.NewCertPool()
			if !pool.AppendCertsFromPEM(pem) {
				return nil, fmt.Errorf("CA certificate %s: no PEM certificate in it", d.caFile)
			}
			conf.RootCAs = pool
		}
		transport = credentials.NewTLS(conf)
	}
	gopts := []grpc.DialOption{
		grpc.WithTransportCredentials(transport),
		grpc.WithKeepaliveParams(keepalive.ClientParameters{Time: 30 * time.Second, Timeout: 10 * time.Second, PermitWithoutStream: true}),
	}
	if d.token != "" {
		if d.tlsConf == nil && !isLoopback(addr) {
			return nil, fmt.Errorf("glissd at %s: a bearer token is sent only over TLS beyond loopback: give the CA certificate (--ca-cert FILE, client.WithTLS)", addr)
		}
		gopts = append(gopts, grpc.WithPerRPCCredentials(bearerToken{token: d.token, secure: d.tlsConf != nil}))
	}
	gopts = append(gopts, d.grpcOpts...)
	conn, err := grpc.NewClient(addr, gopts...)
	if err != nil {
		return nil, fmt.Errorf("glissd at %s: %w", addr, err)
	}
	c := &Client{conn: conn, Scans: glissv1.NewScanServiceClient(conn), Bench: glissv1.NewBenchServiceClient(conn), Audit: glissv1.NewAuditServiceClient(conn)}
	if d.check {
		hctx, cancel := context.WithTimeout(ctx, d.timeout)
		defer cancel()
		resp, err := healthpb.NewHealthClient(conn).Check(hctx, &healthpb.HealthCheckRequest{Service: glissv1.ScanService_ServiceDesc.ServiceName}, grpc.WaitForReady(true))
		if err != nil {
			conn.Close()
			switch status.Code(err) {
			case codes.Unauthenticated, codes.PermissionDenied:
				return nil, fmt.Errorf("glissd at %s refused the connection: %w", addr, err)
			}
			return nil, fmt.Errorf("glissd at %s does not answer (%v): start it with `glissd --data DIR`, or point --server / GLISS_SERVER at it", addr, status.Convert(err).Message())
		}
		if resp.GetStatus() != healthpb.HealthCheckResponse_SERVING {
			conn.Close()
			return nil, fmt.Errorf("glissd at %s is %s", addr, resp.GetStatus())
		}
	}
	return c, nil
}

// Close closes the connection.
func (c *Client) Close() error { return c.conn.Close() }

// Conn exposes the underlying connection (for other services, e.g. reflection).
func (c *Client) Conn() *grpc.ClientConn { return c.conn }

// Submit validates and queues a scan.
func (c *Client) Submit(ctx context.Context, spec *glissv1.ScanSpec) (*glissv1.Scan, error) {
	resp, err := c.Scans.SubmitScan(ctx, &glissv1.SubmitScanRequest{Spec: spec})
	if err != nil {
		return nil, err
	}
	return resp.GetScan(), nil
}

// Preview validates a spec and returns its preview without queueing it.
func (c *Client) Preview(ctx context.Context, spec *glissv1.ScanSpec) (*glissv1.Preview, error) {
	resp, err := c.Scans.SubmitScan(ctx, &glissv1.SubmitScanRequest{Spec: spec, ValidateOnly: true})
	if err != nil {
		return nil, err
	}
	return resp.GetScan().GetPreview(), nil
}

// Get returns a scan record.
func (c *Client) Get(ctx context.Context, id string) (*glissv1.Scan, error) {
	return c.Scans.GetScan(ctx, &glissv1.GetScanRequest{Id: id})
}

// Watch iterates over a scan's events from point from on, until the scan
// ends (the iterator then stops) or ctx ends (it yields the error).
func (c *Client) Watch(ctx context.Context, id string, from uint64) iter.Seq2[*glissv1.ScanEvent, error] {
	return func(yield func(*glissv1.ScanEvent, error) bool) {
		ctx, cancel := context.WithCancel(ctx)
		defer cancel()
		stream, err := c.Scans.WatchScan(ctx, &glissv1.WatchScanRequest{Id: id, FromSeq: from})
		if err != nil {
			yield(nil, err)
			return
		}
		for {
			ev, err := stream.Recv()
			if errors.Is(err, io.EOF) {
				return
			}
			if err != nil {
				yield(nil, err)
				return
			}
			if !yield(ev, nil) {
				return
			}
		}
	}
}

// Points iterates over the stored points of a scan from point from on.
func (c *Client) Points(ctx context.Context, id string, from uint64) iter.Seq2[*glissv1.Point, error] {
	return func(yield func(*glissv1.Point, error) bool) {
		ctx, cancel := context.WithCancel(ctx)
		defer cancel()
		stream, err := c.Scans.ReadPoints(ctx, &glissv1.ReadPointsRequest{Id: id, FromSeq: from})
		if err != nil {
			yield(nil, err)
			return
		}
		for {
			p, err := stream.Recv()
			if errors.Is(err, io.EOF) {
				return
			}
			if err != nil {
				yield(nil, err)
				return
			}
			if !yield(p, nil) {
				return
			}
		}
	}
}

// IsTerminal reports whether a scan state is final.
func IsTerminal(s glissv1.ScanState) bool {
	switch s {
	case glissv1.ScanState_SCAN_STATE_SUCCEEDED, glissv1.ScanState_SCAN_STATE_FAILED, glissv1.ScanState_SCAN_STATE_CANCELLED:
		return true
	}
	return false
}

// Code returns the gRPC status code of an error from this package.
func Code(err error) codes.Code { return status.Code(err) }
