package ports

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/gliss-lab/gliss/drivers"
)

// BenchYAML is the bench file that drives the virtual ports through the
// real serial drivers (driver lineproto, PROTOCOL.md's commands).
func (s *Server) BenchYAML() string {
	var b strings.Builder
	baud := s.opts.Baud
	if baud <= 0 {
		baud = 115200
	}
	cal := s.bench.Calibration
	st, at := cal.Stretcher, cal.Attenuator
	fmt.Fprintf(&b, `# Bench file written by "gliss sim ports": the simulated instruments on
# virtual serial ports (seed %d%s), driven by the real line-protocol driver.
# The protocol is gliss's own: sim/ports/PROTOCOL.md.
bench: sim-ports
calibration:
  stretcher: {lines_per_mm: %g, wavelength_nm: %g, littrow: %t, order: %d, passes: %d, lever: %g, zero_mm: %g, sign: %d}
  attenuator: {pmin_uw: %g, pmax_uw: %g, theta0_deg: %g}
instruments:
`, s.opts.Sim.Seed, faultNote(s.opts.Faults), st.LinesPerMM, st.WavelengthNM, st.Littrow, max(st.Order, 1), st.Passes, st.Lever, st.ZeroMM, signOf(st.Sign),
		at.PMinUW, at.PMaxUW, at.Theta0Deg)
	for _, p := range s.ports {
		e := p.entry
		l := e.Limits
		fmt.Fprintf(&b, "  - name: %s\n    role: %s\n    driver: lineproto\n", e.Name, e.Role)
		switch e.Role {
		case drivers.RoleStage:
			fmt.Fprintf(&b, "    limits: {min_mm: %g, max_mm: %g, speed_mm_per_s: %g, accel_mm_per_s2: %g}\n",
				l.StageMinMM, l.StageMaxMM, l.StageSpeedMMPerS*speedOf(s), l.StageAccelMMPerS2*speedOf(s)*speedOf(s))
		case drivers.RoleAttenuator:
			fmt.Fprintf(&b, "    limits: {min_deg: %g, max_deg: %g, speed_deg_per_s: %g, max_power_uw: %g}\n",
				l.AngleMinDeg, l.AngleMaxDeg, l.RotationSpeedDegPerS*speedOf(s), l.PowerMaxUW)
		case drivers.RoleLaser:
			fmt.Fprintf(&b, "    limits: {min_mev: %g, max_mev: %g, speed_mev_per_s: %g}\n",
				l.DetuningMinMeV, l.DetuningMaxMeV, l.DetuningSpeedMeVPerS*speedOf(s))
		case drivers.RolePowerMeter:
			fmt.Fprintf(&b, "    limits: {max_power_uw: %g}\n", l.PowerMaxUW)
		case drivers.RoleThermometer:
			fmt.Fprintf(&b, "    limits: {min_k: %g, max_k: %g, time_constant_s: %g}\n", l.TemperatureMinK, l.TemperatureMaxK, l.TemperatureTimeConstantS/speedOf(s))
		case drivers.RoleCounter:
			var rates []string
			for _, ch := range sortedKeys(l.CountRateMaxHz) {
				rates = append(rates, fmt.Sprintf("%s: %g", ch, l.CountRateMaxHz[ch]))
			}
			fmt.Fprintf(&b, "    limits: {max_rate_hz: {%s}}\n", strings.Join(rates, ", "))
		}
		fmt.Fprintf(&b, "    settings:\n      transport: {serial: %s, baud: %d, timeout: 500ms}\n", p.link, baud)
		b.WriteString("      identify: ID?\n      ack: '^OK$'\n      error_reply: '^ERR '\n")
		switch e.Role {
		case drivers.RoleStage:
			b.WriteString(motionCommands("MOVE", "POS", 0.005))
		case drivers.RoleAttenuator:
			b.WriteString(motionCommands("TURN", "ANG", 0.05))
		case drivers.RoleLaser:
			b.WriteString(motionCommands("TUNE", "DET", 0.005))
		case drivers.RolePowerMeter:
			b.WriteString("      commands:\n        read: {send: 'PWR?', pattern: '^PWR (?P<value>\\S+) (?P<unit>\\S+)$', unit: uW}\n")
		case drivers.RoleThermometer:
			b.WriteString("      commands:\n        read: {send: 'TEMP?', pattern: '^TEMP (?P<value>\\S+) K$', unit: K}\n        setpoint: 'SETK {value:%.4f}'\n")
		case drivers.RoleCounter:
			chs := []string{"x", "xx"}
			if c, ok := e.Inst.(drivers.Counter); ok {
				chs = c.Channels()
			}
			var groups []string
			for _, ch := range chs {
				groups = append(groups, fmt.Sprintf("(?P<%s>\\d+)", ch))
			}
			fmt.Fprintf(&b, "      channels: [%s]\n      commands:\n        count: {send: 'COUNT {gate_ms:%%.3f}', pattern: '^CNT %s$'}\n",
				strings.Join(chs, ", "), strings.Join(groups, " "))
		}
	}
	return b.String()
}

func motionCommands(move, label string, tol float64) string {
	return fmt.Sprintf(`      tolerance: %g
      poll: 20ms
      commands:
        move: '%s {value:%%.6f}'
        position: {send: '%s?', pattern: '^%s (?P<value>\S+)$'}
        busy: {send: 'BUSY?', busy: '^BUSY 1$', ready: '^BUSY 0$'}
`, tol, move, label, label)
}

func speedOf(s *Server) float64 {
	if s.opts.Sim.Speed > 0 {
		return s.opts.Sim.Speed
	}
	return 1
}

func signOf(s int) int {
	if s < 0 {
		return -1
	}
	return 1
}

func faultNote(f Faults) string {
	if !f.Any() {
		return ""
	}
	return ", faults " + f.String()
}

func sortedKeys(m map[string]float64) []string {
	s := map[string]string{}
	for k := range m {
		s[k] = k
	}
	return sortedNames(s)
}

// WriteBenchYAML writes DIR/bench.yaml and returns its path.
func (s *Server) WriteBenchYAML() (string, error) {
	path := filepath.Join(s.opts.Dir, "bench.yaml")
	if err := os.WriteFile(path, []byte(s.BenchYAML()), 0o644); err != nil {
		return "", fmt.Errorf("virtual ports: %w", err)
	}
	return path, nil
}
