// Package ports serves the simulated instruments of sim/bench on virtual
// serial ports (pseudo-terminals), each speaking the line protocol of
// PROTOCOL.md, so that gliss's real serial drivers (drivers/lineproto over
// drivers/transport) can be run end to end without hardware. It can emulate
// the wire time of a baud rate and inject faults.
package ports

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/creack/pty"
	"golang.org/x/sys/unix"

	"github.com/gliss-lab/gliss/drivers"
	simbench "github.com/gliss-lab/gliss/sim/bench"
)

// Options configure the virtual ports.
type Options struct {
	// Dir receives one symbolic link per instrument (DIR/stage → /dev/pts/N)
	// and bench.yaml. The links are the stable names of the ports, like
	// /dev/serial/by-id/… for USB adapters.
	Dir string
	// Sim configures the simulated bench behind the ports.
	Sim simbench.Options
	// Baud, if > 0, emulates the wire time: every byte takes 10/Baud s
	// (8 data bits, 1 start and 1 stop bit) in each direction.
	Baud   int
	Faults Faults
	Logger *slog.Logger
}

// Server is the running set of virtual ports.
type Server struct {
	opts  Options
	bench *drivers.Bench
	log   *slog.Logger
	ports []*port
	wg    sync.WaitGroup
	stop  context.CancelFunc
	ctx   context.Context
}

// Start builds the simulated bench, opens one pseudo-terminal per
// instrument and serves them until Close or ctx ends.
func Start(ctx context.Context, opts Options) (*Server, error) {
	if opts.Dir == "" {
		return nil, errors.New("virtual ports: Dir is empty")
	}
	if err := os.MkdirAll(opts.Dir, 0o755); err != nil {
		return nil, fmt.Errorf("virtual ports: %w", err)
	}
	log := opts.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	b, err := simbench.New(opts.Sim)
	if err != nil {
		return nil, err
	}
	ctx, stop := context.WithCancel(ctx)
	s := &Server{opts: opts, bench: b, log: log, stop: stop, ctx: ctx}
	for i, e := range b.Entries {
		p := &port{srv: s, entry: e, link: filepath.Join(opts.Dir, e.Name),
			rng: rand.New(rand.NewPCG(opts.Sim.Seed, uint64(i)+0x5eed))}
		if opts.Baud > 0 {
			p.byteTime = time.Duration(float64(10*time.Second) / float64(opts.Baud))
		}
		if err := p.open(); err != nil {
			s.Close()
			return nil, err
		}
		s.ports = append(s.ports, p)
	}
	for _, p := range s.ports {
		s.wg.Add(1)
		go func() { defer s.wg.Done(); p.run(ctx) }()
	}
	return s, nil
}

// Bench is the simulated bench behind the ports.
func (s *Server) Bench() *drivers.Bench { return s.bench }

// Paths maps each instrument name to its stable link in Dir.
func (s *Server) Paths() map[string]string {
	out := map[string]string{}
	for _, p := range s.ports {
		out[p.entry.Name] = p.link
	}
	return out
}

// Devices maps each instrument name to its current pseudo-terminal.
func (s *Server) Devices() map[string]string {
	out := map[string]string{}
	for _, p := range s.ports {
		p.mu.Lock()
		out[p.entry.Name] = p.dev
		p.mu.Unlock()
	}
	return out
}

// Names lists the instruments in bench order.
func (s *Server) Names() []string {
	var out []string
	for _, p := range s.ports {
		out = append(out, p.entry.Name)
	}
	return out
}

// Vanish closes the port of instrument name for d (fault injection by
// hand; the vanish fault does the same periodically).
func (s *Server) Vanish(name string, d time.Duration) error {
	for _, p := range s.ports {
		if p.entry.Name == name {
			p.vanishFor(d)
			return nil
		}
	}
	return fmt.Errorf("virtual ports: no instrument %q", name)
}

// Close stops serving, removes the links and closes the bench.
func (s *Server) Close() error {
	s.stop()
	for _, p := range s.ports {
		p.close()
	}
	s.wg.Wait()
	for _, p := range s.ports {
		os.Remove(p.link)
	}
	return s.bench.Close()
}

type port struct {
	srv      *Server
	entry    *drivers.Entry
	link     string
	byteTime time.Duration
	rng      *rand.Rand // fault draws (not the instrument's noise)

	mu       sync.Mutex
	master   *os.File
	slave    *os.File
	dev      string
	gen      int // incremented at each (re)open
	downTill time.Time

	moveMu  sync.Mutex
	moving  bool
	moveErr error

	txFree time.Time // wire emulation: when the device's transmitter is idle
	rxFree time.Time
	pace   pacer
}

func (p *port) open() error {
	m, sl, err := pty.Open()
	if err != nil {
		return fmt.Errorf("virtual port %s: %w", p.entry.Name, err)
	}
	if err := makeRaw(sl); err != nil {
		m.Close()
		sl.Close()
		return fmt.Errorf("virtual port %s: raw mode: %w", p.entry.Name, err)
	}
	os.Remove(p.link)
	if err := os.Symlink(sl.Name(), p.link); err != nil {
		m.Close()
		sl.Close()
		return fmt.Errorf("virtual port %s: %w", p.entry.Name, err)
	}
	p.mu.Lock()
	p.master, p.slave, p.dev = m, sl, sl.Name()
	p.gen++
	p.mu.Unlock()
	return nil
}

// makeRaw puts the terminal in raw mode (no echo, no line editing), as a
// real serial port opened by a driver is.
func makeRaw(f *os.File) error {
	fd := int(f.Fd())
	t, err := unix.IoctlGetTermios(fd, unix.TCGETS)
	if err != nil {
		return err
	}
	t.Iflag &^= unix.IGNBRK | unix.BRKINT | unix.PARMRK | unix.ISTRIP | unix.INLCR | unix.IGNCR | unix.ICRNL | unix.IXON
	t.Oflag &^= unix.OPOST
	t.Lflag &^= unix.ECHO | unix.ECHONL | unix.ICANON | unix.ISIG | unix.IEXTEN
	t.Cflag &^= unix.CSIZE | unix.PARENB
	t.Cflag |= unix.CS8
	t.Cc[unix.VMIN] = 1
	t.Cc[unix.VTIME] = 0
	return unix.IoctlSetTermios(fd, unix.TCSETS, t)
}

func (p *port) close() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.master != nil {
		p.master.Close()
		p.slave.Close()
		p.master, p.slave = nil, nil
	}
}

func (p *port) vanishFor(d time.Duration) {
	p.mu.Lock()
	p.downTill = time.Now().Add(d)
	p.mu.Unlock()
	p.srv.log.Warn("virtual port vanishes", "instrument", p.entry.Name, "for", d)
	os.Remove(p.link)
	p.close()
}

// run serves the port, re-opening it after a vanish, until ctx ends.
func (p *port) run(ctx context.Context) {
	f := p.srv.opts.Faults
	if f.Vanish > 0 {
		go func() {
			t := time.NewTicker(f.Vanish)
			defer t.Stop()
			for {
				select {
				case <-ctx.Done():
					return
				case <-t.C:
					p.vanishFor(f.Down)
				}
			}
		}()
	}
	for ctx.Err() == nil {
		p.mu.Lock()
		m := p.master
		down := time.Until(p.downTill)
		p.mu.Unlock()
		if m == nil {
			if down > 0 {
				select {
				case <-ctx.Done():
					return
				case <-time.After(down):
				}
			}
			if ctx.Err() != nil {
				return
			}
			if err := p.open(); err != nil {
				p.srv.log.Error("virtual port cannot come back", "instrument", p.entry.Name, "err", err)
				return
			}
			p.srv.log.Info("virtual port is back", "instrument", p.entry.Name, "device", p.dev)
			continue
		}
		p.serve(ctx, m)
	}
}

// serve reads command lines from the master until it is closed.
func (p *port) serve(ctx context.Context, m *os.File) {
	r := bufio.NewReaderSize(m, 1024)
	for {
		line, err := r.ReadString('\n')
		if err != nil {
			return // closed (vanish or Close)
		}
		// Wire time: the bytes came at once through the pty; on a wire they
		// take byteTime each, so the line's last byte lands at rxDone. The
		// command is carried out at once and its reply is held back until
		// the reply's own last byte would have left the wire (send).
		var rxDone time.Time
		if p.byteTime > 0 {
			start := time.Now()
			if p.rxFree.After(start) {
				start = p.rxFree
			}
			p.rxFree = start.Add(time.Duration(len(line)) * p.byteTime)
			rxDone = p.rxFree
		}
		cmd := strings.TrimRight(line, "\r\n")
		reply, ok := p.handle(ctx, cmd)
		if !ok {
			continue
		}
		out, send := p.fault(reply)
		if !send {
			continue
		}
		if err := p.send(m, out, rxDone); err != nil {
			return
		}
	}
}

// send writes b, taking the wire time of its bytes when emulated: its
// transmission starts once the command has arrived (notBefore) and the
// transmitter is free, and b is written when its last byte would land.
func (p *port) send(m *os.File, b []byte, notBefore time.Time) error {
	if p.byteTime > 0 {
		start := time.Now()
		if p.txFree.After(start) {
			start = p.txFree
		}
		if notBefore.After(start) {
			start = notBefore
		}
		p.txFree = start.Add(time.Duration(len(b)) * p.byteTime)
		p.pace.until(p.txFree)
	}
	_, err := m.Write(b)
	return err
}

// pacer waits until given instants more precisely than a timer alone:
// timer wake-ups on this kind of machine come 200–400 µs late (measured),
// several byte times at 115200 baud (87 µs each). It keeps a running
// estimate of that lateness, sleeps until the estimate (plus a guard)
// before the instant, and yields for the rest: CPU is spent only for that
// remainder, and only while wire time is emulated.
type pacer struct{ late time.Duration }

const pacerGuard = 100 * time.Microsecond

func (pc *pacer) until(t time.Time) {
	for {
		d := time.Until(t)
		if d <= 0 {
			return
		}
		margin := pc.late + pacerGuard
		if d > margin+50*time.Microsecond {
			want := d - margin
			t0 := time.Now()
			time.Sleep(want)
			lateness := time.Since(t0) - want
			pc.late = (7*pc.late + max(lateness, 0)) / 8
			continue
		}
		for time.Now().Before(t) {
			runtime.Gosched()
		}
		return
	}
}

// fault applies the configured reply faults.
func (p *port) fault(reply string) ([]byte, bool) {
	f := p.srv.opts.Faults
	full := []byte(reply + "\n")
	if !f.Any() {
		return full, true
	}
	u := p.rng.Float64()
	switch {
	case u < f.TimeoutP:
		p.srv.log.Debug("fault: no reply", "instrument", p.entry.Name)
		return nil, false
	case u < f.TimeoutP+f.GarbleP:
		if len(reply) > 0 {
			b := []byte(reply)
			b[p.rng.IntN(len(b))] = '~'
			return append(b, '\n'), true
		}
	case u < f.TimeoutP+f.GarbleP+f.PartialP:
		return []byte(reply[:len(reply)/2]), true
	case u < f.TimeoutP+f.GarbleP+f.PartialP+f.UnexpectedP:
		return []byte("?? 0\n"), true
	}
	return full, true
}

// Protocol error codes (PROTOCOL.md).
const (
	errUnknown   = "ERR 1 unknown command"
	errNumber    = "ERR 2 bad number"
	errRange     = "ERR 3 out of range"
	errBusy      = "ERR 4 busy"
	errTransient = "ERR 9 transient fault"
)

func f6(v float64) string { return strconv.FormatFloat(v, 'f', 6, 64) }

// handle runs one command and returns the reply (false: no reply).
func (p *port) handle(ctx context.Context, cmd string) (string, bool) {
	f := p.srv.opts.Faults
	if f.ErrorP > 0 {
		// Drawn before the command runs: a refused command does nothing.
		if p.rng.Float64() < f.ErrorP {
			return errTransient, true
		}
	}
	word, arg, _ := strings.Cut(cmd, " ")
	e := p.entry
	if word == "ID?" {
		id := "gliss-sim " + string(e.Role) + " " + e.Name
		if idf, ok := e.Inst.(drivers.Identifier); ok {
			if s, err := idf.Identify(ctx); err == nil {
				id = s
			}
		}
		return "ID " + strings.ReplaceAll(id, "\n", " "), true
	}
	switch e.Role {
	case drivers.RoleStage:
		st := e.Inst.(drivers.Stage)
		switch word {
		case "MOVE":
			return p.startMove(ctx, arg, e.Limits.StageMinMM, e.Limits.StageMaxMM, st.MoveToMM)
		case "POS?":
			return labelled("POS ")(st.PositionMM(ctx))
		}
	case drivers.RoleAttenuator:
		a := e.Inst.(drivers.Attenuator)
		switch word {
		case "TURN":
			return p.startMove(ctx, arg, e.Limits.AngleMinDeg, e.Limits.AngleMaxDeg, a.SetAngleDeg)
		case "ANG?":
			return labelled("ANG ")(a.AngleDeg(ctx))
		}
	case drivers.RoleLaser:
		l := e.Inst.(drivers.Laser)
		switch word {
		case "TUNE":
			return p.startMove(ctx, arg, e.Limits.DetuningMinMeV, e.Limits.DetuningMaxMeV, l.SetDetuningMeV)
		case "DET?":
			return labelled("DET ")(l.DetuningMeV(ctx))
		}
	case drivers.RolePowerMeter:
		if word == "PWR?" {
			v, err := e.Inst.(drivers.PowerMeter).PowerUW(ctx)
			if err != nil {
				return "ERR 5 " + oneLine(err), true
			}
			return "PWR " + strconv.FormatFloat(v, 'g', 9, 64) + " uW", true
		}
	case drivers.RoleThermometer:
		th := e.Inst.(drivers.Thermometer)
		switch word {
		case "TEMP?":
			v, err := th.TemperatureK(ctx)
			if err != nil {
				return "ERR 5 " + oneLine(err), true
			}
			return "TEMP " + strconv.FormatFloat(v, 'f', 4, 64) + " K", true
		case "SETK":
			k, err := strconv.ParseFloat(arg, 64)
			if err != nil || k != k {
				return errNumber, true
			}
			if k < e.Limits.TemperatureMinK || k > e.Limits.TemperatureMaxK {
				return errRange, true
			}
			if err := th.SetSetpointK(ctx, k); err != nil {
				return "ERR 5 " + oneLine(err), true
			}
			return "OK", true
		}
	case drivers.RoleCounter:
		c := e.Inst.(drivers.Counter)
		switch word {
		case "CHAN?":
			return "CHAN " + strings.Join(c.Channels(), " "), true
		case "COUNT":
			ms, err := strconv.ParseFloat(arg, 64)
			if err != nil || ms != ms {
				return errNumber, true
			}
			if ms <= 0 || ms > 3.6e6 {
				return errRange, true
			}
			counts, err := c.Count(ctx, time.Duration(ms*float64(time.Millisecond)))
			if err != nil {
				if errors.Is(err, drivers.ErrLimit) {
					return errRange, true
				}
				return "ERR 5 " + oneLine(err), true
			}
			parts := make([]string, len(counts))
			for i, n := range counts {
				parts[i] = strconv.FormatUint(n, 10)
			}
			return "CNT " + strings.Join(parts, " "), true
		}
	}
	if word == "BUSY?" && (e.Role == drivers.RoleStage || e.Role == drivers.RoleAttenuator || e.Role == drivers.RoleLaser) {
		p.moveMu.Lock()
		defer p.moveMu.Unlock()
		if p.moving {
			return "BUSY 1", true
		}
		return "BUSY 0", true
	}
	if word == "ECHO" {
		// Wire diagnostic: "ECHO <n> <text>" answers <text> padded with
		// dots to n bytes including the line feed.
		ns, text, _ := strings.Cut(arg, " ")
		n, err := strconv.Atoi(ns)
		if err != nil || n < 2 || n > 1024 || len(text) > n-1 {
			return errNumber, true
		}
		return text + strings.Repeat(".", n-1-len(text)), true
	}
	if word == "LASTERR?" {
		p.moveMu.Lock()
		defer p.moveMu.Unlock()
		if p.moveErr == nil {
			return "LASTERR 0", true
		}
		return "LASTERR 5 " + oneLine(p.moveErr), true
	}
	return errUnknown, true
}

func oneLine(err error) string { return strings.ReplaceAll(err.Error(), "\n", "; ") }

// labelled formats a reading as "LABEL value", or an ERR 5 reply.
func labelled(label string) func(float64, error) (string, bool) {
	return func(v float64, err error) (string, bool) {
		if err != nil {
			return "ERR 5 " + oneLine(err), true
		}
		return label + f6(v), true
	}
}

// startMove starts a motion and answers at once; BUSY? tells when it ends.
func (p *port) startMove(ctx context.Context, arg string, lo, hi float64, move func(context.Context, float64) error) (string, bool) {
	v, err := strconv.ParseFloat(strings.TrimSpace(arg), 64)
	if err != nil || v != v {
		return errNumber, true
	}
	if v < lo || v > hi {
		return errRange, true
	}
	p.moveMu.Lock()
	if p.moving {
		p.moveMu.Unlock()
		return errBusy, true
	}
	p.moving = true
	p.moveErr = nil
	p.moveMu.Unlock()
	done := make(chan struct{})
	go func() {
		defer close(done)
		err := move(p.srv.ctx, v)
		p.moveMu.Lock()
		p.moving = false
		p.moveErr = err
		p.moveMu.Unlock()
		if err != nil {
			p.srv.log.Warn("move failed", "instrument", p.entry.Name, "err", err)
		}
	}()
	// A short or instant move ends within a millisecond: answer after it,
	// so that the driver's first BUSY? already sees it done (saves a poll).
	select {
	case <-done:
	case <-time.After(time.Millisecond):
	}
	return "OK", true
}

// sortedNames returns the keys of m in order.
func sortedNames(m map[string]string) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}
