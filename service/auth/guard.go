package auth

import (
	"context"
	"fmt"
	"log/slog"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"

	"github.com/gliss-lab/gliss/service/store"
)

// LocalName is who the audit log names when glissd runs without tokens
// (loopback only).
const LocalName = "local"

// observeMethods are the methods of the gliss services the observe role may call.
var observeMethods = map[string]bool{
	"/gliss.v1.ScanService/GetScan":          true,
	"/gliss.v1.ScanService/ListScans":        true,
	"/gliss.v1.ScanService/WatchScan":        true,
	"/gliss.v1.ScanService/ReadPoints":       true,
	"/gliss.v1.BenchService/ListInstruments": true,
	"/gliss.v1.BenchService/GetInstrument":   true,
	"/gliss.v1.AuditService/ListAudit":       true,
}

// operateMethods need operate although their names read like reads.
var operateMethods = map[string]bool{
	"/gliss.v1.ScanService/SubmitScan":     true, // also with validate_only: it is the submit call
	"/gliss.v1.BenchService/SetInstrument": true,
	"/gliss.v1.ScanService/PauseScan":      true,
	"/gliss.v1.ScanService/ResumeScan":     true,
	"/gliss.v1.ScanService/CancelScan":     true,
}

// observeServices are whole services open to the observe role.
var observeServices = map[string]bool{
	"grpc.health.v1.Health":                    true,
	"grpc.reflection.v1.ServerReflection":      true,
	"grpc.reflection.v1alpha.ServerReflection": true,
}

// readPrefixes: a method of another gliss service whose name starts with one
// of these only reads; every other method needs operate.
var readPrefixes = []string{"Get", "List", "Watch", "Read", "Export"}

// RequiredRole is the role a gRPC method ("/pkg.Service/Method") needs.
// Unknown methods that do not read need operate.
func RequiredRole(fullMethod string) Role {
	if observeMethods[fullMethod] {
		return Observe
	}
	if operateMethods[fullMethod] {
		return Operate
	}
	svc, method, ok := strings.Cut(strings.TrimPrefix(fullMethod, "/"), "/")
	if !ok {
		return Operate
	}
	if observeServices[svc] {
		return Observe
	}
	for _, p := range readPrefixes {
		if strings.HasPrefix(method, p) {
			return Observe
		}
	}
	return Operate
}

type identityKey struct{}

// FromContext returns the caller's identity set by the Guard.
func FromContext(ctx context.Context) (Identity, bool) {
	id, ok := ctx.Value(identityKey{}).(Identity)
	return id, ok
}

// AuditLog is where the Guard records operate calls (the store).
type AuditLog interface {
	AppendAudit(ctx context.Context, e store.AuditEntry) error
}

// Guard checks bearer tokens and roles on every call and records every
// operate call, allowed or not, in the audit log.
type Guard struct {
	// Tokens: nil means no tokens (loopback only): every caller is
	// LocalName with the operate role.
	Tokens *Tokens
	// Audit receives one entry per operate call (nil: none).
	Audit  AuditLog
	Logger *slog.Logger
	// Now is the clock (nil: time.Now).
	Now func() time.Time
}

func (g *Guard) now() time.Time {
	if g.Now != nil {
		return g.Now()
	}
	return time.Now()
}

func (g *Guard) log() *slog.Logger {
	if g.Logger != nil {
		return g.Logger
	}
	return slog.Default()
}

// authorize finds the caller and checks the role method needs. On failure
// the returned identity names the caller as far as known.
func (g *Guard) authorize(ctx context.Context, method string, need Role) (Identity, error) {
	if g.Tokens == nil {
		return Identity{Name: LocalName, Role: Operate}, nil
	}
	tok, err := bearer(ctx)
	if err != nil {
		return Identity{Name: "(no token)"}, err
	}
	id, ok := g.Tokens.Lookup(tok)
	if !ok {
		return Identity{Name: "(unknown token)"}, status.Error(codes.Unauthenticated,
			"the bearer token is not in glissd's token file: check --token-file or GLISS_TOKEN, or ask the daemon's operator for a token")
	}
	if id.Role < need {
		return id, status.Errorf(codes.PermissionDenied,
			"token %q has the %s role; %s needs the %s role: use an operate token (ask the daemon's operator)", id.Name, id.Role, shortMethod(method), need)
	}
	return id, nil
}

func bearer(ctx context.Context) (string, error) {
	md, _ := metadata.FromIncomingContext(ctx)
	vals := md.Get("authorization")
	if len(vals) == 0 {
		return "", status.Error(codes.Unauthenticated,
			"no bearer token: this glissd requires one; pass --token-file FILE or set GLISS_TOKEN (client.WithToken in Go)")
	}
	if len(vals) > 1 {
		return "", status.Error(codes.Unauthenticated, "more than one authorization header: send one bearer token")
	}
	scheme, tok, ok := strings.Cut(strings.TrimSpace(vals[0]), " ")
	if !ok || !strings.EqualFold(scheme, "bearer") || strings.TrimSpace(tok) == "" {
		return "", status.Error(codes.Unauthenticated, `authorization header is not "Bearer TOKEN"`)
	}
	return strings.TrimSpace(tok), nil
}

func shortMethod(full string) string {
	if i := strings.LastIndex(full, "/"); i >= 0 {
		return full[i+1:]
	}
	return full
}

// Unary is the unary server interceptor.
func (g *Guard) Unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
	need := RequiredRole(info.FullMethod)
	id, err := g.authorize(ctx, info.FullMethod, need)
	if err != nil {
		if need == Operate {
			g.record(ctx, id.Name, info.FullMethod, Describe(req, nil), err)
		}
		return nil, err
	}
	resp, err := handler(context.WithValue(ctx, identityKey{}, id), req)
	if need == Operate {
		var out any
		if err == nil {
			out = resp
		}
		g.record(ctx, id.Name, info.FullMethod, Describe(req, out), err)
	}
	return resp, err
}

// Stream is the stream server interceptor.
func (g *Guard) Stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	ctx := ss.Context()
	need := RequiredRole(info.FullMethod)
	id, err := g.authorize(ctx, info.FullMethod, need)
	if err != nil {
		if need == Operate {
			g.record(ctx, id.Name, info.FullMethod, "", err)
		}
		return err
	}
	ws := &stream{ServerStream: ss, ctx: context.WithValue(ctx, identityKey{}, id)}
	err = handler(srv, ws)
	if need == Operate {
		g.record(ctx, id.Name, info.FullMethod, Describe(ws.first, nil), err)
	}
	return err
}

type stream struct {
	grpc.ServerStream
	ctx   context.Context
	first any
}

func (s *stream) Context() context.Context { return s.ctx }

func (s *stream) RecvMsg(m any) error {
	err := s.ServerStream.RecvMsg(m)
	if err == nil && s.first == nil {
		s.first = m
	}
	return err
}

// Outcome is the audit outcome of a call's error: "OK" or "CODE: message".
func Outcome(err error) string {
	if err == nil {
		return "OK"
	}
	st := status.Convert(err)
	return fmt.Sprintf("%s: %s", st.Code(), st.Message())
}

func (g *Guard) record(ctx context.Context, who, method, target string, callErr error) {
	if g.Audit == nil {
		return
	}
	e := store.AuditEntry{At: g.now().UTC(), Who: who, Method: shortMethod(method), Target: clip(target), Outcome: clip(Outcome(callErr))}
	actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), 10*time.Second)
	defer cancel()
	if err := g.Audit.AppendAudit(actx, e); err != nil {
		g.log().Error("audit log: entry not stored", "who", e.Who, "method", e.Method, "target", e.Target, "outcome", e.Outcome, "err", err)
	}
}

const maxAuditText = 1024

func clip(s string) string {
	if len(s) <= maxAuditText {
		return s
	}
	cut := maxAuditText
	for cut > 0 && s[cut]&0xC0 == 0x80 { // do not split a UTF-8 sequence
		cut--
	}
	return s[:cut] + "…"
}
