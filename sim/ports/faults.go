package ports

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// Faults are the faults a virtual port injects, parsed from a SPEC string
// of comma-separated key=value pairs (see PROTOCOL.md):
//
//	timeout=0.01     probability that a command gets no reply at all
//	garble=0.005     probability that one character of a reply is replaced by '~'
//	partial=0.01     probability that a reply stops half-way, without its terminator
//	unexpected=0.01  probability that a reply is replaced by "?? 0"
//	error=0.01       probability that a command is refused with "ERR 9 transient fault"
//	vanish=300s      the port vanishes every 300 s (pseudo-terminal closed, link removed)
//	down=2s          … and comes back after 2 s (default 2s)
//
// A command hit by timeout, partial or garble has still been carried out:
// only its reply is lost, as when a reply is corrupted on the wire.
type Faults struct {
	TimeoutP, GarbleP, PartialP, UnexpectedP, ErrorP float64
	Vanish, Down                                     time.Duration
}

// Any says whether any fault is configured.
func (f Faults) Any() bool {
	return f.TimeoutP+f.GarbleP+f.PartialP+f.UnexpectedP+f.ErrorP > 0 || f.Vanish > 0
}

// String is the SPEC form of f.
func (f Faults) String() string {
	var parts []string
	add := func(k string, p float64) {
		if p > 0 {
			parts = append(parts, k+"="+strconv.FormatFloat(p, 'g', -1, 64))
		}
	}
	add("timeout", f.TimeoutP)
	add("garble", f.GarbleP)
	add("partial", f.PartialP)
	add("unexpected", f.UnexpectedP)
	add("error", f.ErrorP)
	if f.Vanish > 0 {
		parts = append(parts, "vanish="+f.Vanish.String(), "down="+f.Down.String())
	}
	return strings.Join(parts, ",")
}

// ParseFaults parses a SPEC string; "" and "none" mean no faults.
func ParseFaults(spec string) (Faults, error) {
	f := Faults{Down: 2 * time.Second}
	spec = strings.TrimSpace(spec)
	if spec == "" || spec == "none" {
		return f, nil
	}
	seen := map[string]bool{}
	var sumP float64
	for _, item := range strings.Split(spec, ",") {
		k, v, ok := strings.Cut(strings.TrimSpace(item), "=")
		if !ok || k == "" || v == "" {
			return Faults{}, fmt.Errorf("faults %q: item %q: want key=value", spec, item)
		}
		if seen[k] {
			return Faults{}, fmt.Errorf("faults %q: %s given twice", spec, k)
		}
		seen[k] = true
		switch k {
		case "timeout", "garble", "partial", "unexpected", "error":
			p, err := strconv.ParseFloat(v, 64)
			if err != nil || math.IsNaN(p) || p < 0 || p > 1 {
				return Faults{}, fmt.Errorf("faults %q: %s=%s: want a probability in [0, 1]", spec, k, v)
			}
			sumP += p
			switch k {
			case "timeout":
				f.TimeoutP = p
			case "garble":
				f.GarbleP = p
			case "partial":
				f.PartialP = p
			case "unexpected":
				f.UnexpectedP = p
			case "error":
				f.ErrorP = p
			}
		case "vanish", "down":
			d, err := time.ParseDuration(v)
			if err != nil || d <= 0 || d > 24*time.Hour {
				return Faults{}, fmt.Errorf("faults %q: %s=%s: want a duration in (0, 24h] such as 300s", spec, k, v)
			}
			if k == "vanish" {
				f.Vanish = d
			} else {
				f.Down = d
			}
		default:
			return Faults{}, fmt.Errorf("faults %q: unknown key %q (known: timeout, garble, partial, unexpected, error, vanish, down)", spec, k)
		}
	}
	if sumP > 1 {
		return Faults{}, fmt.Errorf("faults %q: the probabilities add up to %g, more than 1", spec, sumP)
	}
	if seen["down"] && !seen["vanish"] {
		return Faults{}, fmt.Errorf("faults %q: down needs vanish", spec)
	}
	return f, nil
}
