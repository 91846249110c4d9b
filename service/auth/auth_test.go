package auth

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"google.golang.org/grpc"

	glissv1 "github.com/gliss-lab/gliss/api/gliss/v1"
)

const goodFile = `# lab tokens
night-watch observe 3f9c0a7d1e2b4c6a8f0e1d2c3b4a5968

anna	operate   b1e0c8d7f6a5948372615049382716a5
`

func TestParseTokens(t *testing.T) {
	tk, err := ParseTokens(strings.NewReader(goodFile))
	if err != nil {
		t.Fatal(err)
	}
	if tk.Len() != 2 {
		t.Fatalf("%d tokens, want 2", tk.Len())
	}
	id, ok := tk.Lookup("b1e0c8d7f6a5948372615049382716a5")
	if !ok || id.Name != "anna" || id.Role != Operate {
		t.Errorf("anna's token: %+v %v", id, ok)
	}
	id, ok = tk.Lookup("3f9c0a7d1e2b4c6a8f0e1d2c3b4a5968")
	if !ok || id.Name != "night-watch" || id.Role != Observe {
		t.Errorf("night-watch's token: %+v %v", id, ok)
	}
	for _, bad := range []string{"", "anna", "3f9c0a7d1e2b4c6a8f0e1d2c3b4a596", "b1e0c8d7f6a5948372615049382716a5 "} {
		if id, ok := tk.Lookup(bad); ok {
			t.Errorf("token %q accepted as %+v", bad, id)
		}
	}
}

func TestParseTokensErrors(t *testing.T) {
	tok := "0123456789abcdef0123"
	for _, c := range []struct{ file, want string }{
		{"", "no token"},
		{"# only a comment\n", "no token"},
		{"anna operate\n", "2 fields"},
		{"anna operate " + tok + " extra\n", "4 fields"},
		{"anna admin " + tok + "\n", `role "admin"`},
		{"anna operate short\n", "5 bytes, allowed 16"},
		{"an/na operate " + tok + "\n", "character '/'"},
		{"anna operate " + tok + "\nanna observe " + tok + "x\n", "already used on line 1"},
		{"anna operate " + tok + "\nbob observe " + tok + "\n", "same token as line 1"},
		{"anna operate " + tok + "\u00e9\n", "printable ASCII"},
		{strings.Repeat("x", 5000) + "\n", "longer than"},
	} {
		_, err := ParseTokens(strings.NewReader(c.file))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("file %.40q: error %v, want one containing %q", c.file, err, c.want)
		}
	}
}

func TestLoadTokensRefusesReadableFile(t *testing.T) {
	path := filepath.Join(t.TempDir(), "tokens")
	if err := os.WriteFile(path, []byte(goodFile), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadTokens(path); err == nil || !strings.Contains(err.Error(), "chmod 600") {
		t.Errorf("mode 644: error %v, want a chmod hint", err)
	}
	if err := os.Chmod(path, 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadTokens(path); err != nil {
		t.Errorf("mode 600: %v", err)
	}
}

func TestRequiredRole(t *testing.T) {
	for m, want := range map[string]Role{
		"/gliss.v1.ScanService/GetScan":                             Observe,
		"/gliss.v1.ScanService/WatchScan":                           Observe,
		"/gliss.v1.ScanService/ReadPoints":                          Observe,
		"/gliss.v1.ScanService/ListScans":                           Observe,
		"/gliss.v1.BenchService/ListInstruments":                    Observe,
		"/gliss.v1.BenchService/GetInstrument":                      Observe,
		"/gliss.v1.AuditService/ListAudit":                          Observe,
		"/grpc.health.v1.Health/Check":                              Observe,
		"/grpc.health.v1.Health/Watch":                              Observe,
		"/grpc.reflection.v1.ServerReflection/ServerReflectionInfo": Observe,
		"/gliss.v1.ScanService/SubmitScan":                          Operate,
		"/gliss.v1.ScanService/PauseScan":                           Operate,
		"/gliss.v1.ScanService/ResumeScan":                          Operate,
		"/gliss.v1.ScanService/CancelScan":                          Operate,
		"/gliss.v1.BenchService/SetInstrument":                      Operate,
		"/gliss.v1.OtherService/FitSomething":                       Operate,
		"/gliss.v1.OtherService/GetSomething":                       Observe,
		"garbage":                                                   Operate,
	} {
		if got := RequiredRole(m); got != want {
			t.Errorf("%s: %v, want %v", m, got, want)
		}
	}
	// Every method of the gliss services is classified on purpose: a new
	// method must be added to a table above or follow the read prefixes.
	for _, sd := range []struct {
		name    string
		methods []string
	}{
		{glissv1.ScanService_ServiceDesc.ServiceName, methodNames(glissv1.ScanService_ServiceDesc.Methods, glissv1.ScanService_ServiceDesc.Streams)},
		{glissv1.BenchService_ServiceDesc.ServiceName, methodNames(glissv1.BenchService_ServiceDesc.Methods, glissv1.BenchService_ServiceDesc.Streams)},
	} {
		for _, m := range sd.methods {
			full := "/" + sd.name + "/" + m
			if !observeMethods[full] && !operateMethods[full] {
				t.Errorf("%s is in neither table", full)
			}
		}
	}
}

func TestDescribe(t *testing.T) {
	got := Describe(&glissv1.PauseScanRequest{Id: "S1", Reason: "lunch"}, &glissv1.Scan{Id: "S1"})
	if want := `id="S1" reason="lunch" → id="S1"`; got != want {
		t.Errorf("pause: %q, want %q", got, want)
	}
	got = Describe(&glissv1.SubmitScanRequest{Spec: &glissv1.ScanSpec{Name: "night map", GateMs: 100}}, &glissv1.SubmitScanResponse{Scan: &glissv1.Scan{Id: "S2"}})
	if !strings.Contains(got, `spec.name="night map"`) || !strings.Contains(got, "spec.gate_ms=100") || !strings.HasSuffix(got, `→ scan.id="S2"`) {
		t.Errorf("submit: %q", got)
	}
	got = Describe(&glissv1.SetInstrumentRequest{Name: "stage", Target: &glissv1.SetInstrumentRequest_GddPs2{GddPs2: 10}}, nil)
	if got != `name="stage" gdd_ps2=10` {
		t.Errorf("set: %q", got)
	}
}

func FuzzParseTokens(f *testing.F) {
	f.Add(goodFile)
	f.Add("a operate 0123456789abcdef\n")
	f.Add("# x\n\n\t\n")
	f.Add("a b c d\n")
	f.Fuzz(func(t *testing.T, s string) {
		tk, err := ParseTokens(strings.NewReader(s))
		if err != nil {
			return
		}
		if tk.Len() == 0 {
			t.Fatal("nil error with no token")
		}
		// Every parsed line's token is found under its own name and role.
		for _, line := range strings.Split(s, "\n") {
			f := strings.Fields(line)
			if len(f) != 3 || strings.HasPrefix(f[0], "#") {
				continue
			}
			id, ok := tk.Lookup(f[2])
			if !ok || id.Name != f[0] || id.Role.String() != f[1] {
				t.Fatalf("line %q: lookup gave %+v %v", line, id, ok)
			}
		}
	})
}

func methodNames(ms []grpc.MethodDesc, ss []grpc.StreamDesc) []string {
	var out []string
	for _, m := range ms {
		out = append(out, m.MethodName)
	}
	for _, s := range ss {
		out = append(out, s.StreamName)
	}
	return out
}
