package main

import (
	"bufio"
	"bytes"
	"context"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"

	"github.com/gliss-lab/gliss/client"
	"github.com/gliss-lab/gliss/client/cli"
	"github.com/gliss-lab/gliss/service/daemon"
)

// There is no Docker engine or systemd on the build machines, so these tests
// check the deployment files against the project instead: every path they
// name exists, every binary is built, and the daemon and client actually
// run with the flags they give (in process for gliss, as a built binary
// for glissd).

// repoRoot is the top of the repository (this package is cmd/glissd).
func repoRoot(t *testing.T) string {
	t.Helper()
	root, err := filepath.Abs("../..")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(filepath.Join(root, "go.mod")); err != nil {
		t.Fatalf("no go.mod at %s", root)
	}
	return root
}

type composeFile struct {
	Name     string
	Services map[string]struct {
		Build *struct {
			Context    string
			Dockerfile string
		}
		Image       string
		NetworkMode string `yaml:"network_mode"`
		Command     []string
		Entrypoint  []string
		Volumes     []string
		Ports       []string
		Restart     string
		DependsOn   map[string]struct{ Condition string } `yaml:"depends_on"`
		Healthcheck *struct {
			Test              []string
			Interval, Timeout string
			StartPeriod       string `yaml:"start_period"`
			Retries           int
		}
		StopGracePeriod string `yaml:"stop_grace_period"`
	}
	Volumes map[string]any
}

// dockerfile is what the test reads from the Dockerfile.
type dockerfile struct {
	froms     []string
	copies    [][]string // COPY arguments without flags, of the build stage
	installed map[string]string
	built     map[string]string // /out/NAME → ./cmd/NAME
	made      map[string]bool   // directories made by mkdir in the build stage
	entry     []string
	cmd       []string
}

func readDockerfile(t *testing.T, path string) dockerfile {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	d := dockerfile{installed: map[string]string{}, built: map[string]string{}, made: map[string]bool{}}
	mkdirRE := regexp.MustCompile(`mkdir -p (\S+)`)
	buildRE := regexp.MustCompile(`go build .*-o (\S+) (\./cmd/\S+)$`)
	stage := 0
	sc := bufio.NewScanner(bytes.NewReader(b))
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		word, rest, _ := strings.Cut(line, " ")
		switch strings.ToUpper(word) {
		case "FROM":
			d.froms = append(d.froms, rest)
			stage++
		case "COPY":
			var args, flags []string
			for _, f := range strings.Fields(rest) {
				if strings.HasPrefix(f, "--") {
					flags = append(flags, f)
				} else {
					args = append(args, f)
				}
			}
			if slices.Contains(flags, "--from=build") {
				d.installed[args[1]] = args[0]
			} else if stage == 1 {
				d.copies = append(d.copies, args)
			} else {
				t.Errorf("Dockerfile: COPY from the context into the runtime image: %q", line)
			}
		case "RUN":
			if m := buildRE.FindStringSubmatch(rest); m != nil {
				d.built[m[1]] = m[2]
			}
			if m := mkdirRE.FindStringSubmatch(rest); m != nil {
				d.made[m[1]] = true
			}
		case "ENTRYPOINT":
			if err := yaml.Unmarshal([]byte(rest), &d.entry); err != nil {
				t.Errorf("ENTRYPOINT %s: want exec form: %v", rest, err)
			}
		case "CMD":
			if err := yaml.Unmarshal([]byte(rest), &d.cmd); err != nil {
				t.Errorf("CMD %s: want exec form: %v", rest, err)
			}
		}
	}
	return d
}

// flagValue returns the value of --name in args.
func flagValue(args []string, name string) (string, bool) {
	for i, a := range args {
		if a == "--"+name && i+1 < len(args) {
			return args[i+1], true
		}
		if v, ok := strings.CutPrefix(a, "--"+name+"="); ok {
			return v, true
		}
	}
	return "", false
}

// withFlag replaces the value of --name in args (a copy).
func withFlag(args []string, name, value string) []string {
	out := slices.Clone(args)
	for i, a := range out {
		if a == "--"+name && i+1 < len(out) {
			out[i+1] = value
			return out
		}
		if strings.HasPrefix(a, "--"+name+"=") {
			out[i] = "--" + name + "=" + value
			return out
		}
	}
	return append(out, "--"+name, value)
}

func freeLoopbackAddr(t *testing.T) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	l.Close()
	return addr
}

var (
	buildOnce sync.Once
	builtBin  string
	buildErr  error
)

// buildGlissd builds cmd/glissd once into a temporary directory (removed by TestMain).
func buildGlissd(t *testing.T) string {
	t.Helper()
	buildOnce.Do(func() {
		dir, err := os.MkdirTemp("", "glissd-build-")
		if err != nil {
			buildErr = err
			return
		}
		builtBin = filepath.Join(dir, "glissd")
		if out, err := exec.Command("go", "build", "-o", builtBin, ".").CombinedOutput(); err != nil {
			buildErr = fmt.Errorf("go build ./cmd/glissd: %v\n%s", err, out)
		}
	})
	if buildErr != nil {
		t.Fatal(buildErr)
	}
	return builtBin
}

func TestMain(m *testing.M) {
	code := m.Run()
	if builtBin != "" {
		os.RemoveAll(filepath.Dir(builtBin))
	}
	os.Exit(code)
}

// runGlissd starts the built glissd with args, waits until it serves
// (gRPC health through client.Dial) and returns a stop function that sends
// SIGTERM and checks the exit status 0.
func runGlissd(t *testing.T, bin string, args []string) func() {
	t.Helper()
	var logs bytes.Buffer
	cmd := exec.Command(bin, args...)
	cmd.Stdout, cmd.Stderr = &logs, &logs
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	addr, _ := flagValue(args, "listen")
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	c, err := client.Dial(ctx, addr, client.WithHealthTimeout(15*time.Second))
	if err != nil {
		cmd.Process.Kill()
		cmd.Wait()
		t.Fatalf("glissd %v does not serve: %v\n%s", args, err, logs.String())
	}
	c.Close()
	return func() {
		t.Helper()
		cmd.Process.Signal(syscall.SIGTERM)
		done := make(chan error, 1)
		go func() { done <- cmd.Wait() }()
		select {
		case err := <-done:
			if err != nil {
				t.Errorf("glissd %v after SIGTERM: %v\n%s", args, err, logs.String())
			}
		case <-time.After(60 * time.Second):
			cmd.Process.Kill()
			t.Errorf("glissd did not stop within 60 s of SIGTERM\n%s", logs.String())
		}
	}
}

func runGliss(t *testing.T, args []string) (string, error) {
	t.Helper()
	var out bytes.Buffer
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	err := cli.Run(ctx, &cli.Env{Stdout: &out, Stderr: &out, Stdin: strings.NewReader(""), Getenv: func(string) string { return "" }}, args)
	return out.String(), err
}

func TestComposeAndDockerfile(t *testing.T) {
	root := repoRoot(t)
	raw, err := os.ReadFile(filepath.Join(root, "docker-compose.yml"))
	if err != nil {
		t.Fatal(err)
	}
	var cf composeFile
	dec := yaml.NewDecoder(bytes.NewReader(raw))
	dec.KnownFields(true) // a misspelt key is an error, not ignored
	if err := dec.Decode(&cf); err != nil {
		t.Fatalf("docker-compose.yml: %v", err)
	}
	gd, ok := cf.Services["glissd"]
	if !ok {
		t.Fatalf("no service glissd in %v", cf.Services)
	}
	demo, ok := cf.Services["demo"]
	if !ok {
		t.Fatal("no service demo")
	}

	// The build: context and Dockerfile exist.
	if gd.Build == nil {
		t.Fatal("glissd has no build section")
	}
	ctxDir := filepath.Join(root, gd.Build.Context)
	dfPath := filepath.Join(ctxDir, gd.Build.Dockerfile)
	if _, err := os.Stat(dfPath); err != nil {
		t.Fatalf("Dockerfile %s: %v", gd.Build.Dockerfile, err)
	}
	if filepath.Clean(ctxDir) != root {
		t.Errorf("build context %s is not the top of the repository (go.mod must be in it)", gd.Build.Context)
	}
	df := readDockerfile(t, dfPath)

	// The Go of the build stage is the go.mod's (golang:MAJOR.MINOR).
	gomod, _ := os.ReadFile(filepath.Join(root, "go.mod"))
	goVer := regexp.MustCompile(`(?m)^go (\d+\.\d+)`).FindSubmatch(gomod)
	if len(df.froms) != 2 || goVer == nil || !strings.HasPrefix(df.froms[0], "golang:"+string(goVer[1])+" ") {
		t.Errorf("Dockerfile stages %q: want golang:%s AS build, then a runtime image", df.froms, goVer[1])
	}
	// Every COPY source exists, and every top-level directory with Go code is copied.
	copied := map[string]bool{}
	for _, c := range df.copies {
		for _, src := range c[:len(c)-1] {
			if _, err := os.Stat(filepath.Join(ctxDir, src)); err != nil {
				t.Errorf("Dockerfile COPY %s: %v", src, err)
			}
			copied[src] = true
		}
	}
	entries, _ := os.ReadDir(root)
	for _, e := range entries {
		if !e.IsDir() || strings.HasPrefix(e.Name(), ".") {
			continue
		}
		hasGo := false
		filepath.WalkDir(filepath.Join(root, e.Name()), func(p string, d os.DirEntry, err error) error {
			if err == nil && !d.IsDir() && strings.HasSuffix(p, ".go") && !strings.HasSuffix(p, "_test.go") {
				hasGo = true
				return filepath.SkipAll
			}
			return nil
		})
		if hasGo && !copied[e.Name()] {
			t.Errorf("Dockerfile does not COPY %s/, which holds Go code the build needs", e.Name())
		}
	}
	if !copied["go.mod"] || !copied["go.sum"] {
		t.Error("Dockerfile does not COPY go.mod and go.sum")
	}
	// Both binaries are built from packages main that exist, and installed.
	bins := map[string]bool{}
	for dst, src := range df.installed {
		if df.made[src] {
			continue // a directory (the data directory), not a binary
		}
		pkg, ok := df.built[src]
		if !ok {
			t.Errorf("Dockerfile installs %s from %s, which no go build writes", dst, src)
			continue
		}
		if b, err := os.ReadFile(filepath.Join(root, pkg, "main.go")); err != nil || !bytes.Contains(b, []byte("package main")) {
			t.Errorf("Dockerfile builds %s: no package main there (%v)", pkg, err)
		}
		bins[dst] = true
	}
	for _, b := range []string{"/usr/local/bin/glissd", "/usr/local/bin/gliss"} {
		if !bins[b] {
			t.Errorf("image lacks %s (installed: %v)", b, df.installed)
		}
	}
	if len(df.entry) != 1 || df.entry[0] != "/usr/local/bin/glissd" {
		t.Errorf("ENTRYPOINT %v, want [/usr/local/bin/glissd]", df.entry)
	}

	// Networking: glissd listens on loopback only (it refuses anything else
	// without TLS and tokens), in the host's namespace; the demo and the
	// health check dial that address from the same namespace.
	listen, ok := flagValue(gd.Command, "listen")
	if !ok || !daemon.IsLoopback(listen) {
		t.Errorf("glissd --listen %q: must be a loopback address", listen)
	}
	for name, s := range map[string]string{"glissd": gd.NetworkMode, "demo": demo.NetworkMode} {
		if s != "host" {
			t.Errorf("service %s: network_mode %q; a loopback-only glissd is reachable only in the host's namespace", name, s)
		}
	}
	if len(gd.Ports) > 0 || len(demo.Ports) > 0 {
		t.Errorf("ports %v %v: not used with network_mode host", gd.Ports, demo.Ports)
	}
	// The data: a named volume declared at the top, mounted where --data points.
	data, _ := flagValue(gd.Command, "data")
	if len(gd.Volumes) != 1 {
		t.Fatalf("glissd volumes %v: want the data volume", gd.Volumes)
	}
	vol, target, _ := strings.Cut(gd.Volumes[0], ":")
	if _, ok := cf.Volumes[vol]; !ok || strings.HasPrefix(vol, ".") || strings.HasPrefix(vol, "/") {
		t.Errorf("volume %q is not a named volume declared under volumes: (%v)", vol, cf.Volumes)
	}
	if target != data || data == "" {
		t.Errorf("volume mounted at %q, glissd --data %q", target, data)
	}
	if want := "/var/lib/gliss"; !slices.Contains(df.cmd, want) || data != want {
		t.Errorf("data directory %q; the image prepares %s (CMD %v)", data, want, df.cmd)
	}
	// glissd's stop window after SIGTERM is 5 minutes (main.go); Docker
	// must not kill it sooner (its default is 10 s).
	if d, err := time.ParseDuration(gd.StopGracePeriod); err != nil || d < 5*time.Minute {
		t.Errorf("glissd stop_grace_period %q: want ≥ 5m (%v)", gd.StopGracePeriod, err)
	}
	if gd.Restart != "unless-stopped" && gd.Restart != "always" && gd.Restart != "on-failure" {
		t.Errorf("glissd restart %q", gd.Restart)
	}
	// The demo: a one-shot gliss run against glissd once it is healthy.
	if demo.Image != gd.Image || demo.Image == "" {
		t.Errorf("demo image %q, glissd builds %q", demo.Image, gd.Image)
	}
	if demo.Restart != "no" || demo.DependsOn["glissd"].Condition != "service_healthy" {
		t.Errorf("demo: restart %q, depends_on %v; want a one-shot after glissd is healthy", demo.Restart, demo.DependsOn)
	}
	if gd.Healthcheck == nil || len(gd.Healthcheck.Test) < 2 || gd.Healthcheck.Test[0] != "CMD" {
		t.Fatalf("glissd healthcheck %v: want [CMD, binary, args…] (the image has no shell)", gd.Healthcheck)
	}
	for _, s := range []string{gd.Healthcheck.Interval, gd.Healthcheck.Timeout, gd.Healthcheck.StartPeriod} {
		if _, err := time.ParseDuration(s); err != nil {
			t.Errorf("healthcheck duration %q: %v", s, err)
		}
	}
	health := gd.Healthcheck.Test[1:]
	for name, argv := range map[string][]string{"demo entrypoint": demo.Entrypoint, "healthcheck": health} {
		if len(argv) == 0 || !bins[argv[0]] || filepath.Base(argv[0]) != "gliss" {
			t.Errorf("%s %v: not the installed gliss", name, argv)
		}
	}
	for name, argv := range map[string][]string{"demo": demo.Command, "healthcheck": health[1:]} {
		if s, _ := flagValue(argv, "server"); s != listen {
			t.Errorf("%s dials %q, glissd listens on %q", name, s, listen)
		}
	}

	// Run them: the built glissd with the compose command (on a free port,
	// a temporary data directory, the simulation sped up for the test),
	// then the health check and the demo through gliss's own commands.
	if testing.Short() {
		t.Skip("-short: not running glissd and the demo")
	}
	bin := buildGlissd(t)
	addr := freeLoopbackAddr(t)
	args := withFlag(withFlag(withFlag(gd.Command, "listen", addr), "data", t.TempDir()), "sim-speed", "1000")
	stop := runGlissd(t, bin, args)
	defer stop()
	if out, err := runGliss(t, withFlag(health[1:], "server", addr)); err != nil {
		t.Errorf("healthcheck %v: %v\n%s", health, err, out)
	}
	out, err := runGliss(t, withFlag(demo.Command, "server", addr))
	if err != nil || !strings.Contains(out, "SUCCEEDED") {
		t.Errorf("demo %v: %v\n%s", demo.Command, err, out)
	}
}

// readUnit parses a systemd unit: section → key → values (keys may repeat).
func readUnit(t *testing.T, path string) map[string]map[string][]string {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	u := map[string]map[string][]string{}
	sec := ""
	for i, line := range strings.Split(string(b), "\n") {
		line = strings.TrimSpace(line)
		switch {
		case line == "" || strings.HasPrefix(line, "#") || strings.HasPrefix(line, ";"):
		case strings.HasPrefix(line, "[") && strings.HasSuffix(line, "]"):
			sec = line[1 : len(line)-1]
			u[sec] = map[string][]string{}
		default:
			k, v, ok := strings.Cut(line, "=")
			if !ok || sec == "" {
				t.Fatalf("%s:%d: %q is not KEY=VALUE in a section", path, i+1, line)
			}
			u[sec][strings.TrimSpace(k)] = append(u[sec][strings.TrimSpace(k)], strings.TrimSpace(v))
		}
	}
	return u
}

func TestSystemdUnit(t *testing.T) {
	path := "glissd.service"
	u := readUnit(t, path)
	svc := u["Service"]
	one := func(k string) string {
		if v := svc[k]; len(v) == 1 {
			return v[0]
		}
		t.Errorf("[Service] %s: %v, want one value", k, svc[k])
		return ""
	}
	if r := one("Restart"); r != "on-failure" {
		t.Errorf("Restart=%s, want on-failure", r)
	}
	if g := strings.Fields(one("SupplementaryGroups")); !slices.Contains(g, "dialout") {
		t.Errorf("SupplementaryGroups=%v lacks dialout (serial ports)", g)
	}
	if one("User") == "" || one("User") == "root" {
		t.Error("glissd must run as its own user")
	}
	// glissd's stop window after SIGTERM is 5 minutes (main.go); systemd
	// must not kill it sooner.
	if to, err := time.ParseDuration(strings.ReplaceAll(one("TimeoutStopSec"), "min", "m")); err != nil || to < 5*time.Minute {
		t.Errorf("TimeoutStopSec=%s: want ≥ 5min (%v)", one("TimeoutStopSec"), err)
	}
	if w := u["Install"]["WantedBy"]; !slices.Contains(w, "multi-user.target") {
		t.Errorf("WantedBy=%v", w)
	}
	execStart := strings.Fields(one("ExecStart"))
	if len(execStart) < 2 || filepath.Base(execStart[0]) != "glissd" || !filepath.IsAbs(execStart[0]) {
		t.Fatalf("ExecStart=%v: want an absolute path to glissd", execStart)
	}
	args := execStart[1:]
	data, _ := flagValue(args, "data")
	if state := one("StateDirectory"); data != "/var/lib/"+state {
		t.Errorf("--data %s is not the StateDirectory /var/lib/%s", data, state)
	}
	if l, _ := flagValue(args, "listen"); !daemon.IsLoopback(l) {
		t.Errorf("--listen %q: must be loopback", l)
	}
	// systemd's own checker, where it is installed: no unknown keys or bad values.
	if sa, err := exec.LookPath("systemd-analyze"); err == nil {
		out, _ := exec.Command(sa, "verify", path).CombinedOutput()
		for _, line := range strings.Split(string(out), "\n") {
			if strings.Contains(line, "Unknown key") || strings.Contains(line, "Failed to parse") || strings.Contains(line, "Invalid") || strings.Contains(line, "Unknown section") {
				t.Errorf("systemd-analyze verify: %s", line)
			}
		}
	}

	// Run glissd with the unit's flags: the bench file is gliss's example
	// (the simulated instruments), the data and port temporary.
	if testing.Short() {
		t.Skip("-short: not running glissd")
	}
	benchOut, err := runGliss(t, []string{"bench", "example"})
	if err != nil {
		t.Fatalf("gliss bench example: %v", err)
	}
	bench := filepath.Join(t.TempDir(), "bench.yaml")
	if err := os.WriteFile(bench, []byte(benchOut), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, ok := flagValue(args, "bench"); !ok {
		t.Errorf("ExecStart has no --bench: a lab PC runs its real instruments")
	}
	bin := buildGlissd(t)
	run := withFlag(withFlag(withFlag(args, "listen", freeLoopbackAddr(t)), "data", t.TempDir()), "bench", bench)
	runGlissd(t, bin, run)()
}
