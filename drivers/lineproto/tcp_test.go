package lineproto

import (
	"bufio"
	"context"
	"fmt"
	"net"
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

// lineServer serves a line device on loopback; handle gets each command and
// returns the reply ("" for none).
func lineServer(t *testing.T, handle func(cmd string) string) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { ln.Close() })
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go func() {
				defer c.Close()
				r := bufio.NewReader(c)
				for {
					line, err := r.ReadString('\n')
					if err != nil {
						return
					}
					if out := handle(strings.TrimRight(line, "\r\n")); out != "" {
						c.Write([]byte(out + "\n"))
					}
				}
			}()
		}
	}()
	return ln.Addr().String()
}

func open(t *testing.T, flavour, text string, role drivers.Role, lim drivers.Limits, pool *transport.Pool, name string) drivers.Instrument {
	t.Helper()
	var n yaml.Node
	if err := yaml.Unmarshal([]byte(text), &n); err != nil {
		t.Fatal(err)
	}
	d := &yamlnode.Decoder{File: "t.yaml"}
	s := defaultSettings(flavour)
	d.Decode(&n, "settings", s)
	s.CheckRole(d, n.Content[0], "settings", role)
	if err := d.Err(); err != nil {
		t.Fatal(err)
	}
	s.SetLimits(lim)
	s.SetPool(pool)
	inst, err := (&Driver{flavour: flavour}).Open(context.Background(), drivers.Config{Name: name, Role: role, Settings: s})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { inst.Close() })
	return inst
}

func TestSCPIPowerMeterOverTCP(t *testing.T) {
	var mu sync.Mutex
	var got []string
	addr := lineServer(t, func(cmd string) string {
		mu.Lock()
		got = append(got, cmd)
		mu.Unlock()
		switch cmd {
		case "*IDN?":
			return "DEMO,PM-1,0001,2.3"
		case "MEAS:POW?":
			return "1.234E-05" // W
		case "SYST:ERR?":
			return `+0,"No error"`
		}
		return ""
	})
	pm := open(t, "scpi", fmt.Sprintf("transport: {tcp: %q}\ncommands:\n  read: {send: 'MEAS:POW?', unit: W}\n", addr),
		drivers.RolePowerMeter, drivers.Limits{}, &transport.Pool{}, "meter").(drivers.PowerMeter)
	uw, err := pm.PowerUW(context.Background())
	// 1.234E-05 W = 12.34 µW (SI prefixes).
	if err != nil || uw != 12.34 {
		t.Fatalf("power = %v, %v; want 12.34 µW", uw, err)
	}
	id, _ := pm.(drivers.Identifier).Identify(context.Background())
	if id != "DEMO,PM-1,0001,2.3" {
		t.Fatalf("identification %q", id)
	}
	mu.Lock()
	defer mu.Unlock()
	if strings.Join(got, "|") != "*IDN?|*CLS|SYST:ERR?|MEAS:POW?|*IDN?" { // Identify asks again, live
		t.Fatalf("traffic %q", got)
	}
}

// Two axes of one controller on one socket: the pool gives them one link,
// whose transactions never interleave (the device would answer the wrong
// axis otherwise).
func TestTwoAxesShareOnePort(t *testing.T) {
	var mu sync.Mutex
	pos := map[string]float64{"1": 0, "2": 0}
	inFlight := 0
	maxInFlight := 0
	addr := lineServer(t, func(cmd string) string {
		mu.Lock()
		inFlight++
		maxInFlight = max(maxInFlight, inFlight)
		mu.Unlock()
		defer func() { mu.Lock(); inFlight--; mu.Unlock() }()
		time.Sleep(200 * time.Microsecond)
		mu.Lock()
		defer mu.Unlock()
		ax, rest := cmd[:1], cmd[1:]
		switch {
		case strings.HasPrefix(rest, "GO "):
			v, _ := strconv.ParseFloat(rest[3:], 64)
			pos[ax] = v
			return "OK"
		case rest == "WHERE?":
			return fmt.Sprintf("%s:%.4f", ax, pos[ax])
		}
		return "ERR"
	})
	text := `transport: {tcp: %q}
axis: "%s"
ack: '^OK$%s'
tolerance: 0.001
commands:
  move: '{axis}GO {value:%%.4f}'
  position: {send: '{axis}WHERE?', pattern: '^%s:(?P<value>\S+)$'}
`
	pool := &transport.Pool{}
	lim := drivers.Limits{StageMinMM: 0, StageMaxMM: 100, StageSpeedMMPerS: 1000}
	a := open(t, "lineproto", fmt.Sprintf(text, addr, "1", "", "1"), drivers.RoleStage, lim, pool, "stage1").(drivers.Stage)
	b := open(t, "lineproto", fmt.Sprintf(text, addr, "2", "", "2"), drivers.RoleStage, lim, pool, "stage2").(drivers.Stage)
	if n := pool.Users("tcp:" + addr); n != 2 {
		t.Fatalf("link users %d, want 2 (one link for both axes)", n)
	}
	var wg sync.WaitGroup
	for i, st := range []drivers.Stage{a, b} {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for j := 0; j < 20; j++ {
				target := float64(10*i + j)
				if err := st.MoveToMM(context.Background(), target); err != nil {
					t.Error(err)
					return
				}
				if p, err := st.PositionMM(context.Background()); err != nil || p != target {
					t.Errorf("axis %d: at %v, %v; want %v", i+1, p, err, target)
					return
				}
			}
		}()
	}
	wg.Wait()
	if maxInFlight != 1 {
		t.Fatalf("%d transactions were in flight at once on the shared port", maxInFlight)
	}
}

func TestCounterWithGateCommand(t *testing.T) {
	var mu sync.Mutex
	var opened time.Time
	var gateMS float64
	addr := lineServer(t, func(cmd string) string {
		mu.Lock()
		defer mu.Unlock()
		switch {
		case strings.HasPrefix(cmd, "GATE "):
			gateMS, _ = strconv.ParseFloat(cmd[5:], 64)
			opened = time.Now()
			return "OK"
		case cmd == "READ?":
			if time.Since(opened) < time.Duration(gateMS*float64(time.Millisecond)) {
				return "ERR gate still open"
			}
			return "C 120,45"
		}
		return "ERR"
	})
	ctr := open(t, "lineproto", fmt.Sprintf(`transport: {tcp: %q}
ack: '^OK$'
error_reply: '^ERR'
channels: [x, xx]
commands:
  gate: 'GATE {gate_ms:%%d}'
  count: {send: 'READ?', pattern: '^C (?P<x>\d+),(?P<xx>\d+)$'}
`, addr), drivers.RoleCounter, drivers.Limits{}, &transport.Pool{}, "ctr").(drivers.Counter)
	c, err := ctr.Count(context.Background(), 30*time.Millisecond)
	if err != nil || len(c) != 2 || c[0] != 120 || c[1] != 45 {
		t.Fatalf("counts %v, %v; want [120 45]", c, err)
	}
	if gateMS != 30 {
		t.Fatalf("gate sent as %v ms, want 30", gateMS)
	}
}
