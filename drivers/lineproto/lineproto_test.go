package lineproto

import (
	"context"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"go.yaml.in/yaml/v3"

	"github.com/gliss-lab/gliss/drivers"
	"github.com/gliss-lab/gliss/drivers/benchfile/yamlnode"
	"github.com/gliss-lab/gliss/drivers/transport"
)

// fakeStage is a device on the far side of an Exchanger: a stage that
// moves at speedMMPerS in real time, with knobs for faults.
type fakeStage struct {
	mu          sync.Mutex
	pos, target float64
	t0          time.Time
	speed       float64
	sent        []string
	dropAck     int  // next n MOVE acks are lost (the move is carried out)
	dropCmd     int  // next n MOVE commands are lost entirely
	garblePos   int  // next n POS? replies are garbled
	stall       bool // moves stop half-way
	silent      bool // no reply to anything
	refuse      bool // moves are refused through the error queue and not carried out
	idn         string
	errQueue    []string
}

func (f *fakeStage) now() float64 {
	if f.t0.IsZero() {
		return f.pos
	}
	d := f.target - f.pos
	travelled := f.speed * time.Since(f.t0).Seconds()
	if travelled >= math.Abs(d) {
		f.pos, f.t0 = f.target, time.Time{}
		return f.pos
	}
	return f.pos + math.Copysign(travelled, d)
}

func (f *fakeStage) Exchange(ctx context.Context, tx transport.Tx) (string, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	f.sent = append(f.sent, tx.Send)
	if f.silent {
		return "", transport.ErrTimeout
	}
	word, arg, _ := strings.Cut(tx.Send, " ")
	switch word {
	case "*IDN?":
		return f.idn, nil
	case "*CLS":
		f.errQueue = nil
		return "", nil
	case "SYST:ERR?":
		if len(f.errQueue) > 0 {
			e := f.errQueue[0]
			f.errQueue = f.errQueue[1:]
			return e, nil
		}
		return `+0,"No error"`, nil
	case "MOVE", "POS:TARG":
		if f.dropCmd > 0 {
			f.dropCmd--
			return "", transport.ErrTimeout
		}
		v, err := strconv.ParseFloat(arg, 64)
		if f.refuse {
			f.errQueue = append(f.errQueue, `-222,"Data out of range"`)
			return "", nil
		}
		if err != nil {
			f.errQueue = append(f.errQueue, `-104,"Data type error"`)
			return "ERR bad number", nil
		}
		f.pos = f.now()
		f.target, f.t0 = v, time.Now()
		if f.stall {
			f.target = f.pos + (v-f.pos)/2
		}
		if f.dropAck > 0 {
			f.dropAck--
			return "", transport.ErrTimeout
		}
		if word == "POS:TARG" {
			return "", nil
		}
		return "OK", nil
	case "POS?":
		p := f.now()
		if f.garblePos > 0 {
			f.garblePos--
			return "POS 1~3.4", nil
		}
		return fmt.Sprintf("POS %.6f", p), nil
	case "BUSY?":
		f.now()
		if f.t0.IsZero() {
			return "BUSY 0", nil
		}
		return "BUSY 1", nil
	case "*OPC?":
		for !f.t0.IsZero() {
			f.mu.Unlock()
			time.Sleep(time.Millisecond)
			f.mu.Lock()
			f.now()
		}
		return "1", nil
	}
	return "ERR unknown", nil
}

func (f *fakeStage) Close() error { return nil }

func (f *fakeStage) count(cmd string) int {
	f.mu.Lock()
	defer f.mu.Unlock()
	n := 0
	for _, s := range f.sent {
		if strings.HasPrefix(s, cmd) {
			n++
		}
	}
	return n
}

const stageYAML = `
transport: {tcp: "fake-%s"}
retries: 2
backoff: 1ms
poll: 2ms
motion_margin: 200ms
tolerance: 0.001
ack: '^OK$'
error_reply: '^ERR'
commands:
  move: 'MOVE {value:%%.4f}'
  position: {send: 'POS?', pattern: '^POS (?P<value>\S+)$'}
  busy: {send: 'BUSY?', busy: '^BUSY 1$', ready: '^BUSY 0$'}
`

// openFake decodes settings text, attaches the fake device through a pool
// under the settings' transport key, and opens the instrument.
func openFake(t *testing.T, flavour, text string, role drivers.Role, lim drivers.Limits, dev transport.Exchanger) *Instrument {
	t.Helper()
	var n yaml.Node
	if err := yaml.Unmarshal([]byte(text), &n); err != nil {
		t.Fatal(err)
	}
	d := &yamlnode.Decoder{File: "test.yaml"}
	s := defaultSettings(flavour)
	d.Decode(&n, "settings", s)
	s.CheckRole(d, n.Content[0], "settings", role)
	if err := d.Err(); err != nil {
		t.Fatal(err)
	}
	s.SetLimits(lim)
	pool := &transport.Pool{}
	spec := linkSpec{tcp: s.Transport.TCP, framing: s.Transport.framing()}
	hold, err := pool.Get("tcp:"+s.Transport.TCP, spec, func() (transport.Exchanger, error) { return dev, nil })
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { hold.Close() })
	s.SetPool(pool)
	inst, err := (&Driver{flavour: flavour}).Open(context.Background(), drivers.Config{Name: "stage", Role: role, Settings: s})
	if err != nil {
		t.Fatal(err)
	}
	// Callers tell roles apart by type assertion: the opened value must
	// implement its own role's interface and no other.
	_, isStage := inst.(drivers.Stage)
	_, isAtt := inst.(drivers.Attenuator)
	_, isPM := inst.(drivers.PowerMeter)
	_, isCtr := inst.(drivers.Counter)
	if isStage != (role == drivers.RoleStage) || isAtt || isPM || isCtr {
		t.Fatalf("a %s opened as %T implements stage %v, attenuator %v, powermeter %v, counter %v", role, inst, isStage, isAtt, isPM, isCtr)
	}
	return inst.(Stage).Instrument
}

var fakeLimits = drivers.Limits{StageMinMM: 0, StageMaxMM: 100, StageSpeedMMPerS: 500, StageAccelMMPerS2: 0}

func TestMoveArrivesAndRefusesOutOfRange(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 10}
	in := openFake(t, "lineproto", fmt.Sprintf(stageYAML, t.Name()), drivers.RoleStage, fakeLimits, dev)
	ctx := context.Background()
	if err := in.moveToMM(ctx, 30); err != nil {
		t.Fatal(err)
	}
	if p, err := in.positionMM(ctx); err != nil || math.Abs(p-30) > 1e-6 {
		t.Fatalf("position after move = %v, %v; want 30", p, err)
	}
	before := dev.count("MOVE")
	err := in.moveToMM(ctx, 150)
	if !errors.Is(err, drivers.ErrLimit) || !strings.Contains(err.Error(), "[0, 100]") {
		t.Fatalf("move beyond travel: %v; want ErrLimit naming the range", err)
	}
	if dev.count("MOVE") != before {
		t.Fatal("an out-of-range move was sent to the device")
	}
}

func TestLostAckIsNotResentBlindly(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 10, dropAck: 1}
	in := openFake(t, "lineproto", fmt.Sprintf(stageYAML, t.Name()), drivers.RoleStage, fakeLimits, dev)
	if err := in.moveToMM(context.Background(), 40); err != nil {
		t.Fatal(err)
	}
	if n := dev.count("MOVE"); n != 1 {
		t.Fatalf("MOVE sent %d times; the device had taken the first one, so want 1", n)
	}
}

func TestLostCommandIsResentAfterCheckingPosition(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 10, dropCmd: 1}
	in := openFake(t, "lineproto", fmt.Sprintf(stageYAML, t.Name()), drivers.RoleStage, fakeLimits, dev)
	if err := in.moveToMM(context.Background(), 40); err != nil {
		t.Fatal(err)
	}
	dev.mu.Lock()
	sent := append([]string(nil), dev.sent...)
	dev.mu.Unlock()
	// After the lost MOVE there must be a position (or busy) query before the next MOVE.
	first := -1
	for i, s := range sent {
		if strings.HasPrefix(s, "MOVE") {
			if first >= 0 {
				between := strings.Join(sent[first+1:i], " ")
				if !strings.Contains(between, "POS?") {
					t.Fatalf("MOVE re-sent without reading the position first: %q", sent)
				}
				return
			}
			first = i
		}
	}
	t.Fatalf("MOVE was not re-sent although the device never took it: %q", sent)
}

func TestGarbledReplyRetriedNeverZero(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 12.5, garblePos: 2}
	in := openFake(t, "lineproto", fmt.Sprintf(stageYAML, t.Name()), drivers.RoleStage, fakeLimits, dev)
	p, err := in.positionMM(context.Background())
	if err != nil || p != 12.5 {
		t.Fatalf("position = %v, %v; want 12.5 after two garbled replies", p, err)
	}
	dev.garblePos = 10
	p, err = in.positionMM(context.Background())
	if err == nil || !errors.Is(err, drivers.ErrUnavailable) || !errors.Is(err, ErrBadReply) {
		t.Fatalf("persistently garbled: %v, %v; want an error wrapping ErrUnavailable and ErrBadReply", p, err)
	}
}

func TestSilentInstrumentIsUnavailable(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 1}
	in := openFake(t, "lineproto", fmt.Sprintf(stageYAML, t.Name()), drivers.RoleStage, fakeLimits, dev)
	dev.silent = true
	err := in.moveToMM(context.Background(), 5)
	if !errors.Is(err, drivers.ErrUnavailable) || !errors.Is(err, transport.ErrTimeout) {
		t.Fatalf("silent stage: %v; want ErrUnavailable wrapping the timeout", err)
	}
}

func TestStalledMoveIsAnError(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 10, stall: true}
	in := openFake(t, "lineproto", fmt.Sprintf(stageYAML, t.Name()), drivers.RoleStage, fakeLimits, dev)
	err := in.moveToMM(context.Background(), 50)
	if err == nil || !strings.Contains(err.Error(), "stopped at 30") {
		t.Fatalf("stalled move: %v; want an error naming where it stopped", err)
	}
}

func TestNoBusyQueryPollsPositionWithDeadline(t *testing.T) {
	text := strings.Replace(fmt.Sprintf(stageYAML, t.Name()), "  busy: {send: 'BUSY?', busy: '^BUSY 1$', ready: '^BUSY 0$'}\n", "", 1)
	dev := &fakeStage{speed: 500, pos: 10}
	in := openFake(t, "lineproto", text, drivers.RoleStage, fakeLimits, dev)
	if err := in.moveToMM(context.Background(), 60); err != nil {
		t.Fatal(err)
	}
	dev.stall = true
	t0 := time.Now()
	err := in.moveToMM(context.Background(), 0)
	if err == nil || !strings.Contains(err.Error(), "did not arrive") {
		t.Fatalf("stalled move without busy query: %v", err)
	}
	// deadline: 1.5 × 60 mm / 500 mm/s + 200 ms margin = 0.38 s
	if el := time.Since(t0); el < 300*time.Millisecond {
		t.Fatalf("gave up after %v, before the motion deadline", el)
	}
}

func TestSCPIFlavour(t *testing.T) {
	dev := &fakeStage{speed: 500, pos: 10, idn: "ACME,STAGE-1,0042,1.0"}
	text := fmt.Sprintf(`
transport: {tcp: "fake-%s"}
backoff: 1ms
tolerance: 0.001
commands:
  move: 'POS:TARG {value:%%.4f}'
  position: {send: 'POS?', pattern: '^POS (?P<value>\S+)$'}
`, t.Name())
	in := openFake(t, "scpi", text, drivers.RoleStage, fakeLimits, dev)
	ctx := context.Background()
	if id, _ := in.Identify(ctx); id != dev.idn {
		t.Fatalf("identify = %q; want the *IDN? reply read at connect", id)
	}
	if err := in.moveToMM(ctx, 20); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"*IDN?", "*CLS", "POS:TARG 20.0000", "SYST:ERR?", "*OPC?"} {
		if dev.count(want) == 0 {
			t.Errorf("the SCPI flavour did not send %q (sent %q)", want, dev.sent)
		}
	}
	dev.mu.Lock()
	dev.refuse = true
	dev.mu.Unlock()
	before := dev.count("POS:TARG")
	err := in.moveToMM(ctx, 30)
	if !errors.Is(err, ErrRefused) || !errors.Is(err, drivers.ErrUnavailable) || !strings.Contains(err.Error(), "Data out of range") {
		t.Fatalf("refused move: %v; want ErrRefused and ErrUnavailable with the instrument's message", err)
	}
	// retries: 3 (the default) → at most 4 sends, each after a position check.
	if n := dev.count("POS:TARG") - before; n != 4 {
		t.Fatalf("refused move sent %d times, want 1 + 3 retries", n)
	}
}

func TestRecordThenReplayGivesSameReadings(t *testing.T) {
	dir := t.TempDir()
	rec, err := transport.NewRecorder(dir)
	if err != nil {
		t.Fatal(err)
	}
	dev := &fakeStage{speed: 500, pos: 10}
	text := fmt.Sprintf(stageYAML, t.Name())
	var n yaml.Node
	yaml.Unmarshal([]byte(text), &n)
	s := defaultSettings("lineproto")
	d := &yamlnode.Decoder{File: "t.yaml"}
	d.Decode(&n, "", s)
	s.SetLimits(fakeLimits)
	s.SetRecorder(rec)
	pool := &transport.Pool{}
	hold, _ := pool.Get("tcp:"+s.Transport.TCP, linkSpec{tcp: s.Transport.TCP, framing: s.Transport.framing()}, func() (transport.Exchanger, error) { return dev, nil })
	defer hold.Close()
	s.SetPool(pool)
	ctx := context.Background()
	inst, err := (&Driver{flavour: "lineproto"}).Open(ctx, drivers.Config{Name: "stage", Role: drivers.RoleStage, Settings: s})
	if err != nil {
		t.Fatal(err)
	}
	stage := inst.(drivers.Stage)
	_ = stage
	if err := stage.MoveToMM(ctx, 25); err != nil {
		t.Fatal(err)
	}
	live, _ := stage.PositionMM(ctx)
	rec.Close()

	s2 := defaultSettings("lineproto")
	d.Decode(&n, "", s2)
	s2.Transport = Transport{Replay: rec.Path(), Timeout: time.Second}
	s2.SetLimits(fakeLimits)
	s2.SetPool(&transport.Pool{})
	inst2, err := (&Driver{flavour: "lineproto"}).Open(ctx, drivers.Config{Name: "stage", Role: drivers.RoleStage, Settings: s2})
	if err != nil {
		t.Fatal(err)
	}
	// The replayed traffic has the poll count of the live run; the same
	// sequence of calls must reproduce it and the reading.
	if err := inst2.(drivers.Stage).MoveToMM(ctx, 25); err != nil {
		t.Fatalf("replayed move: %v", err)
	}
	got, err := inst2.(drivers.Stage).PositionMM(ctx)
	if err != nil || got != live {
		t.Fatalf("replayed position = %v, %v; live run read %v", got, err, live)
	}
}
