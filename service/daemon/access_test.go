package daemon_test

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/client/cli"
	"github.com/gliss-lab/gliss/service/daemon"
)

// selfSigned writes a self-signed certificate for 127.0.0.1 and its key.
func selfSigned(t *testing.T, dir string) (certFile, keyFile string) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1),
		Subject:      pkix.Name{CommonName: "glissd test"},
		NotBefore:    time.Now().Add(-time.Hour),
		NotAfter:     time.Now().Add(time.Hour),
		IPAddresses:  []net.IP{net.IPv4(127, 0, 0, 1)},
		KeyUsage:     x509.KeyUsageDigitalSignature | x509.KeyUsageCertSign,
		ExtKeyUsage:  []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
		IsCA:         true, BasicConstraintsValid: true,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	kder, err := x509.MarshalECPrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	if err := os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "EC PRIVATE KEY", Bytes: kder}), 0o600); err != nil {
		t.Fatal(err)
	}
	return certFile, keyFile
}

const (
	observeToken = "obs-4d1c9e7a2b6f08135e7d"
	operateToken = "op-9a7e5c3b1d0f2468ace1"
)

func writeTokens(t *testing.T, dir string) string {
	t.Helper()
	path := filepath.Join(dir, "tokens")
	body := "# test tokens\nnight-watch observe " + observeToken + "\nanna operate " + operateToken + "\n"
	if err := os.WriteFile(path, []byte(body), 0o600); err != nil {
		t.Fatal(err)
	}
	return path
}

func TestNonLoopbackNeedsTLSAndTokens(t *testing.T) {
	dir := t.TempDir()
	cert, key := selfSigned(t, dir)
	tokens := writeTokens(t, dir)
	ctx := context.Background()
	// Refused before anything listens: no other address is ever bound.
	for _, c := range []struct {
		cfg  daemon.Config
		want []string
	}{
		{daemon.Config{Listen: "0.0.0.0:0", DataDir: dir}, []string{"--tls-cert", "--tokens", "loopback"}},
		{daemon.Config{Listen: "0.0.0.0:0", DataDir: dir, TLSCertFile: cert, TLSKeyFile: key}, []string{"--tokens"}},
		{daemon.Config{Listen: "0.0.0.0:0", DataDir: dir, TokensFile: tokens}, []string{"--tls-cert"}},
		{daemon.Config{Listen: "127.0.0.1:0", DataDir: dir, TLSCertFile: cert}, []string{"--tls-key"}},
	} {
		d, err := daemon.Start(ctx, c.cfg)
		if err == nil {
			d.Stop(ctx)
			t.Errorf("%+v: started", c.cfg)
			continue
		}
		for _, w := range c.want {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("%+v: error %q does not mention %s", c.cfg, err, w)
			}
		}
	}
}

func TestAccessControl(t *testing.T) {
	dir := t.TempDir()
	cert, key := selfSigned(t, dir)
	tokens := writeTokens(t, dir)
	d, err := daemon.Start(context.Background(), daemon.Config{
		Listen: "127.0.0.1:0", DataDir: filepath.Join(dir, "data"), SimSpeed: 1000,
		TLSCertFile: cert, TLSKeyFile: key, TokensFile: tokens,
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		sctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := d.Stop(sctx); err != nil {
			t.Errorf("stop: %v", err)
		}
	})
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	addr := d.Addr()
	dial := func(opts ...client.DialOption) *client.Client {
		t.Helper()
		c, err := client.Dial(ctx, addr, append([]client.DialOption{client.WithTLS(cert), client.WithoutHealthCheck()}, opts...)...)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { c.Close() })
		return c
	}
	check := func(name string, err error, want codes.Code, msgPart string) {
		t.Helper()
		if status.Code(err) != want {
			t.Errorf("%s: code %v (%v), want %v", name, status.Code(err), err, want)
			return
		}
		if msgPart != "" && !strings.Contains(status.Convert(err).Message(), msgPart) {
			t.Errorf("%s: message %q lacks %q", name, status.Convert(err).Message(), msgPart)
		}
	}
	spec := client.ChirpSpec(client.Range(-5, 5, 3), client.Options{GateMS: 10, Name: "access"})

	// Without TLS the daemon does not answer at all.
	if _, err := client.Dial(ctx, addr, client.WithToken(operateToken), client.WithHealthTimeout(time.Second)); err == nil {
		t.Error("plain-text dial to a TLS daemon succeeded")
	}
	// A token is never sent in clear beyond loopback.
	if _, err := client.Dial(ctx, "192.0.2.1:7355", client.WithToken(operateToken)); err == nil || !strings.Contains(err.Error(), "TLS") {
		t.Errorf("token without TLS to a non-loopback address: %v", err)
	}
	// Dial's health check needs a token too.
	if _, err := client.Dial(ctx, addr, client.WithTLS(cert)); err == nil || !strings.Contains(err.Error(), "GLISS_TOKEN") {
		t.Errorf("dial without token: %v, want a hint at GLISS_TOKEN", err)
	}

	none := dial()
	_, err = none.Scans.ListScans(ctx, &glissv1.ListScansRequest{})
	check("list without token", err, codes.Unauthenticated, "--token-file")
	_, err = none.Submit(ctx, spec)
	check("submit without token", err, codes.Unauthenticated, "token")
	wrong := dial(client.WithToken("not-a-token-of-this-daemon"))
	_, err = wrong.Scans.ListScans(ctx, &glissv1.ListScansRequest{})
	check("list with a wrong token", err, codes.Unauthenticated, "not in glissd's token file")
	stream, err := wrong.Scans.WatchScan(ctx, &glissv1.WatchScanRequest{Id: "x"})
	if err == nil {
		_, err = stream.Recv()
	}
	check("watch with a wrong token", err, codes.Unauthenticated, "")

	obs := dial(client.WithToken(observeToken))
	op := dial(client.WithToken(operateToken))
	if _, err := client.Dial(ctx, addr, client.WithTLS(cert), client.WithToken(observeToken)); err != nil {
		t.Errorf("observe token: dial with health check: %v", err)
	}
	_, err = obs.Submit(ctx, spec)
	check("observer submits", err, codes.PermissionDenied, "operate")
	_, err = obs.Bench.SetInstrument(ctx, &glissv1.SetInstrumentRequest{Name: "stage", Target: &glissv1.SetInstrumentRequest_GddPs2{GddPs2: 1}})
	check("observer moves the stage", err, codes.PermissionDenied, "SetInstrument")

	sc, err := op.Submit(ctx, spec)
	if err != nil {
		t.Fatalf("operator submits: %v", err)
	}
	_, err = obs.Scans.CancelScan(ctx, &glissv1.CancelScanRequest{Id: sc.Id})
	check("observer cancels", err, codes.PermissionDenied, "")
	// The observer watches the operator's scan to its end and reads it.
	var n int
	for ev, err := range obs.Watch(ctx, sc.Id, 0) {
		if err != nil {
			t.Fatalf("observer watches: %v", err)
		}
		if ev.GetPoint() != nil {
			n++
		}
	}
	if n != 3 {
		t.Errorf("observer saw %d points, want 3", n)
	}
	if _, err := obs.Bench.ListInstruments(ctx, &glissv1.ListInstrumentsRequest{}); err != nil {
		t.Errorf("observer lists instruments: %v", err)
	}
	_, err = op.Scans.ResumeScan(ctx, &glissv1.ResumeScanRequest{Id: sc.Id})
	check("operator resumes a finished scan", err, codes.FailedPrecondition, "SUCCEEDED")

	// The audit log has every operate call, allowed or refused, newest first.
	resp, err := obs.Audit.ListAudit(ctx, &glissv1.ListAuditRequest{})
	if err != nil {
		t.Fatal(err)
	}
	type row struct{ who, method, outcomePrefix string }
	want := []row{
		{"anna", "ResumeScan", "FailedPrecondition"},
		{"night-watch", "CancelScan", "PermissionDenied"},
		{"anna", "SubmitScan", "OK"},
		{"night-watch", "SetInstrument", "PermissionDenied"},
		{"night-watch", "SubmitScan", "PermissionDenied"},
		{"(no token)", "SubmitScan", "Unauthenticated"},
	}
	if len(resp.Entries) != len(want) {
		for _, e := range resp.Entries {
			t.Logf("audit: %v", e)
		}
		t.Fatalf("%d audit entries, want %d", len(resp.Entries), len(want))
	}
	for i, w := range want {
		e := resp.Entries[i]
		if e.Who != w.who || e.Method != w.method || !strings.HasPrefix(e.Outcome, w.outcomePrefix) || e.At == nil {
			t.Errorf("audit entry %d: %v, want %+v", i, e, w)
		}
	}
	if got := resp.Entries[2].Target; !strings.Contains(got, sc.Id) || !strings.Contains(got, `spec.name="access"`) {
		t.Errorf("submit's audit target %q lacks the scan id or the spec's name", got)
	}
	if got := resp.Entries[0].Target; !strings.Contains(got, sc.Id) {
		t.Errorf("resume's audit target %q lacks the scan id", got)
	}
	_, err = obs.Audit.ListAudit(ctx, &glissv1.ListAuditRequest{PageSize: 5000})
	check("audit page too large", err, codes.InvalidArgument, "page_size")
	_, err = obs.Audit.ListAudit(ctx, &glissv1.ListAuditRequest{PageToken: "garbage"})
	check("audit bad page token", err, codes.InvalidArgument, "page_token")

	// gliss audit, with the token from a file and the CA certificate.
	tokFile := filepath.Join(dir, "my-token")
	if err := os.WriteFile(tokFile, []byte(observeToken+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	var out, errOut bytes.Buffer
	env := &cli.Env{Stdout: &out, Stderr: &errOut, Getenv: func(string) string { return "" }}
	if err := cli.Run(ctx, env, []string{"audit", "--limit", "3", "--server", addr, "--token-file", tokFile, "--ca-cert", cert}); err != nil {
		t.Fatalf("gliss audit: %v (%s)", err, errOut.String())
	}
	lines := strings.Split(strings.TrimSpace(out.String()), "\n")
	if len(lines) != 4 || !strings.Contains(lines[1], "ResumeScan") || !strings.Contains(lines[3], "SubmitScan") || !strings.Contains(lines[3], "anna") {
		t.Errorf("gliss audit --limit 3:\n%s", out.String())
	}
	// GLISS_TOKEN in the environment; an observer cannot cancel.
	out.Reset()
	env.Getenv = func(k string) string {
		switch k {
		case "GLISS_TOKEN":
			return observeToken
		case "GLISS_CA_CERT":
			return cert
		}
		return ""
	}
	err = cli.Run(ctx, env, []string{"scan", "cancel", "--server", addr, sc.Id})
	if err == nil || !strings.Contains(err.Error(), "operate") {
		t.Errorf("gliss scan cancel with an observe token: %v", err)
	}
}

// TestLocalAudit: without tokens (loopback) operate calls are audited as "local".
func TestLocalAudit(t *testing.T) {
	_, c := startDaemon(t, daemon.Config{SimInstant: true})
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	_, err := c.Scans.PauseScan(ctx, &glissv1.PauseScanRequest{Id: "no-such-scan"})
	if status.Code(err) != codes.NotFound {
		t.Fatalf("pause unknown: %v", err)
	}
	resp, err := c.Audit.ListAudit(ctx, &glissv1.ListAuditRequest{})
	if err != nil {
		t.Fatal(err)
	}
	if len(resp.Entries) != 1 || resp.Entries[0].Who != "local" || resp.Entries[0].Method != "PauseScan" ||
		!strings.HasPrefix(resp.Entries[0].Outcome, "NotFound") || !strings.Contains(resp.Entries[0].Target, "no-such-scan") {
		t.Errorf("audit %v", resp.Entries)
	}
}
