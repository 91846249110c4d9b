package lineproto

import (
	"errors"
	"fmt"
	"math"
	"regexp"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/gliss-lab/gliss/drivers/benchfile/yamlnode"
)

// ErrBadReply marks a reply that cannot be read as what was asked for. It
// is a fault, never a zero.
var ErrBadReply = errors.New("unreadable reply")

// ErrRefused marks an error reply or an error reported by the error query.
var ErrRefused = errors.New("instrument reports an error")

// Pattern is a regular expression (RE2 syntax) from a bench file.
type Pattern struct{ re *regexp.Regexp }

// DecodeNode implements yamlnode.Unmarshaler.
func (p *Pattern) DecodeNode(d *yamlnode.Decoder, n *yaml.Node, key string) error {
	var s string
	d.Decode(n, key, &s)
	if s == "" {
		return nil
	}
	re, err := regexp.Compile(s)
	if err != nil {
		return fmt.Errorf("pattern %q: %v", s, err)
	}
	p.re = re
	return nil
}

// MustPattern compiles a pattern for built-in defaults.
func MustPattern(s string) *Pattern { return &Pattern{re: regexp.MustCompile(s)} }

// Match reports whether s matches; an absent pattern matches nothing.
func (p *Pattern) Match(s string) bool { return p != nil && p.re != nil && p.re.MatchString(s) }

func (p *Pattern) String() string {
	if p == nil || p.re == nil {
		return ""
	}
	return p.re.String()
}

// decimalNumber is a plain decimal number: no hex, no underscores, no
// "Inf"/"NaN" (which strconv.ParseFloat would accept).
var decimalNumber = regexp.MustCompile(`^[-+]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]{1,4})?$`)

// defaultNumber is "number, optionally followed by a unit".
var defaultNumber = regexp.MustCompile(`^\s*([-+]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][-+]?[0-9]+)?)\s*([A-Za-zµ°%]*)\s*$`)

// siPrefix gives the decimal exponent of a unit prefix.
var siPrefix = map[string]int{
	"": 0, "p": -12, "n": -9, "u": -6, "µ": -6, "m": -3, "k": 3, "M": 6, "G": 9,
}

// unitShift is the power of ten that converts a value in unit got to unit
// want: equal units, or the same base unit with SI prefixes (1 mW =
// 10³ µW). An empty got means the reply carried no unit and is taken to be
// in want.
func unitShift(got, want string) (int, error) {
	if got == "" || got == want {
		return 0, nil
	}
	if want == "" {
		return 0, fmt.Errorf("reply carries unit %q, but the bench file names none for it", got)
	}
	for _, base := range []string{"W", "m", "K", "s", "Hz", "eV", "deg", "°", "V", "A"} {
		pg, okg := strings.CutSuffix(got, base)
		pw, okw := strings.CutSuffix(want, base)
		if !okg || !okw {
			continue
		}
		eg, okg := siPrefix[pg]
		ew, okw := siPrefix[pw]
		if okg && okw {
			return eg - ew, nil
		}
	}
	return 0, fmt.Errorf("unit %q cannot be converted to %q", got, want)
}

// shiftDecimal parses num·10^shift as one decimal number, so that the
// conversion adds no rounding of its own ("1.5E-2" mW → 15 µW exactly).
func shiftDecimal(num string, shift int) (float64, error) {
	if shift == 0 {
		return strconv.ParseFloat(num, 64)
	}
	mant, exp := num, 0
	if i := strings.IndexAny(num, "eE"); i >= 0 {
		e, err := strconv.Atoi(num[i+1:])
		if err != nil {
			return 0, err
		}
		mant, exp = num[:i], e
	}
	return strconv.ParseFloat(mant+"e"+strconv.Itoa(exp+shift), 64)
}

// ParseNumber reads a number from a reply. With a pattern, its group named
// "value" holds the number and an optional group "unit" the unit; without
// one, the reply is a number optionally followed by a unit. assumed is the
// unit of a reply that carries none ("" means want); want is the unit the
// caller works in ("" for none). A value in another SI prefix of the same
// unit is converted. NaN, infinities and anything else that is not a number
// are ErrBadReply.
func ParseNumber(reply string, p *Pattern, assumed, want string) (float64, error) {
	var num, unit string
	if p != nil && p.re != nil {
		m := p.re.FindStringSubmatch(reply)
		if m == nil {
			return 0, fmt.Errorf("%w: %q does not match %q", ErrBadReply, reply, p.re.String())
		}
		i := p.re.SubexpIndex("value")
		if i < 0 {
			return 0, fmt.Errorf("%w: pattern %q has no group named value", ErrBadReply, p.re.String())
		}
		num = strings.TrimSpace(m[i])
		if j := p.re.SubexpIndex("unit"); j >= 0 {
			unit = m[j]
		}
	} else {
		m := defaultNumber.FindStringSubmatch(reply)
		if m == nil {
			return 0, fmt.Errorf("%w: %q is not a number with an optional unit", ErrBadReply, reply)
		}
		num, unit = m[1], m[2]
	}
	if unit == "" {
		unit = assumed
	}
	shift, err := unitShift(unit, want)
	if err != nil {
		return 0, fmt.Errorf("%w: %q: %v", ErrBadReply, reply, err)
	}
	if !decimalNumber.MatchString(num) {
		return 0, fmt.Errorf("%w: %q is not a finite number", ErrBadReply, num)
	}
	x, err := shiftDecimal(num, shift)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return 0, fmt.Errorf("%w: %q is not a finite number", ErrBadReply, num)
	}
	return x, nil
}

// ParseCounts reads one count per channel. With a pattern, each channel's
// count is in the group named after the channel; without one, the reply is
// exactly len(channels) non-negative integers separated by spaces or commas.
func ParseCounts(reply string, p *Pattern, channels []string) ([]uint64, error) {
	var fields []string
	if p != nil && p.re != nil {
		m := p.re.FindStringSubmatch(reply)
		if m == nil {
			return nil, fmt.Errorf("%w: %q does not match %q", ErrBadReply, reply, p.re.String())
		}
		for _, ch := range channels {
			i := p.re.SubexpIndex(ch)
			if i < 0 {
				return nil, fmt.Errorf("%w: pattern %q has no group named %s", ErrBadReply, p.re.String(), ch)
			}
			fields = append(fields, m[i])
		}
	} else {
		fields = strings.FieldsFunc(reply, func(r rune) bool { return r == ' ' || r == ',' || r == '\t' })
		if len(fields) != len(channels) {
			return nil, fmt.Errorf("%w: %q has %d fields, want %d counts (%s)", ErrBadReply, reply, len(fields), len(channels), strings.Join(channels, ", "))
		}
	}
	out := make([]uint64, len(fields))
	for i, f := range fields {
		v, err := strconv.ParseUint(strings.TrimSpace(f), 10, 64)
		if err != nil {
			return nil, fmt.Errorf("%w: count %q of channel %s is not a non-negative integer", ErrBadReply, f, channels[i])
		}
		out[i] = v
	}
	return out, nil
}

// ParseState reads a busy/ready reply: it must match exactly one of the
// two patterns.
func ParseState(reply string, busy, ready *Pattern) (isBusy bool, err error) {
	b, r := busy.Match(reply), ready.Match(reply)
	switch {
	case b && !r:
		return true, nil
	case r && !b:
		return false, nil
	case b && r:
		return false, fmt.Errorf("%w: %q matches both the busy %q and the ready %q pattern", ErrBadReply, reply, busy, ready)
	}
	return false, fmt.Errorf("%w: %q matches neither busy %q nor ready %q", ErrBadReply, reply, busy, ready)
}

// Query is a command that expects a reply, with how to read it. In a bench
// file it is a string (the command; the reply is a number with an optional
// unit) or a mapping. Unit is the unit of a reply that carries none (a power
// meter answering in W: unit W); a reply's own unit is converted by its SI
// prefix to the role's unit (µW for power, K for temperature; for
// positions, Unit itself, before scale and offset):
//
//	position: {send: "POS?", pattern: '^POS (?P<value>\S+)$'}
//	busy:     {send: "BUSY?", busy: '^BUSY 1$', ready: '^BUSY 0$'}
//	read:     {send: "PWR?", unit: uW}
type Query struct {
	Send    Template
	Pattern *Pattern
	Unit    string
	Busy    *Pattern
	Ready   *Pattern
}

type queryFields struct {
	Send    *yaml.Node `bench:"send,required"`
	Pattern *Pattern   `bench:"pattern"`
	Unit    string     `bench:"unit"`
	Busy    *Pattern   `bench:"busy"`
	Ready   *Pattern   `bench:"ready"`
}

func decodeQuery(d *yamlnode.Decoder, n *yaml.Node, key string, allowed ...string) *Query {
	q := &Query{}
	if n.Kind == yaml.ScalarNode {
		q.Send = decodeTemplate(d, n, key, allowed...)
		return q
	}
	var f queryFields
	d.Decode(n, key, &f)
	if f.Send != nil {
		q.Send = decodeTemplate(d, f.Send, yamlnode.Key(key, "send"), allowed...)
	}
	q.Pattern, q.Unit, q.Busy, q.Ready = f.Pattern, f.Unit, f.Busy, f.Ready
	return q
}
