package lineproto

import (
	"errors"
	"fmt"
	"slices"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"

	"github.com/gliss-lab/gliss/drivers/benchfile/yamlnode"
)

// Template is a command with placeholders, parsed from a bench file:
//
//	MOVE {value:%.4f}      the target in device units, printf-formatted
//	{axis}POS?             the axis name from the settings
//	COUNT {gate_ms:%d}     the gate in ms (also {gate_s})
//
// "{{" and "}}" stand for literal braces. A placeholder without a format
// uses %g for numbers. Allowed verbs: %f %e %g %d with flags, width and
// precision (%d rounds to the nearest integer).
type Template struct {
	src   string
	parts []part
}

type part struct {
	lit  string
	name string // "" for a literal
	verb string // printf format of the value
}

// Vars are the values a template may use.
type Vars struct {
	Value  float64
	Axis   string
	GateMS float64
}

var placeholderNames = []string{"value", "axis", "gate_ms", "gate_s"}

// ParseTemplate parses a template; allowed lists the placeholder names this
// command may use.
func ParseTemplate(src string, allowed ...string) (Template, error) {
	t := Template{src: src}
	var lit strings.Builder
	flush := func() {
		if lit.Len() > 0 {
			t.parts = append(t.parts, part{lit: lit.String()})
			lit.Reset()
		}
	}
	for i := 0; i < len(src); i++ {
		c := src[i]
		switch {
		case c == '{' && i+1 < len(src) && src[i+1] == '{':
			lit.WriteByte('{')
			i++
		case c == '}' && i+1 < len(src) && src[i+1] == '}':
			lit.WriteByte('}')
			i++
		case c == '}':
			return Template{}, fmt.Errorf("template %q: lone '}' at byte %d (write '}}' for a brace)", src, i)
		case c == '{':
			end := strings.IndexByte(src[i:], '}')
			if end < 0 {
				return Template{}, fmt.Errorf("template %q: '{' at byte %d is never closed", src, i)
			}
			body := src[i+1 : i+end]
			name, verb, hasVerb := strings.Cut(body, ":")
			if !slices.Contains(placeholderNames, name) {
				return Template{}, fmt.Errorf("template %q: unknown placeholder {%s} (known: %s)", src, name, strings.Join(placeholderNames, ", "))
			}
			if !slices.Contains(allowed, name) {
				return Template{}, fmt.Errorf("template %q: placeholder {%s} has no meaning in this command (allowed: %s)", src, name, orNone(allowed))
			}
			if name == "axis" {
				if hasVerb {
					return Template{}, fmt.Errorf("template %q: {axis} takes no format", src)
				}
				verb = "%s"
			} else if !hasVerb {
				verb = "%g"
			} else if err := checkVerb(verb); err != nil {
				return Template{}, fmt.Errorf("template %q: placeholder {%s}: %w", src, body, err)
			}
			flush()
			t.parts = append(t.parts, part{name: name, verb: verb})
			i += end
		default:
			lit.WriteByte(c)
		}
	}
	flush()
	if len(t.parts) == 0 {
		return Template{}, errors.New("template is empty")
	}
	return t, nil
}

func orNone(s []string) string {
	if len(s) == 0 {
		return "none"
	}
	return strings.Join(s, ", ")
}

// checkVerb accepts %[flags][width][.prec](f|e|g|d), with at most 2-digit
// width and precision.
func checkVerb(v string) error {
	bad := fmt.Errorf("format %q: want a printf verb such as %%.3f, %%e, %%g or %%d", v)
	if len(v) < 2 || v[0] != '%' {
		return bad
	}
	s := v[1:]
	for len(s) > 0 && strings.IndexByte("+- 0", s[0]) >= 0 {
		s = s[1:]
	}
	digits := func() int {
		n := 0
		for n < len(s) && s[n] >= '0' && s[n] <= '9' {
			n++
		}
		return n
	}
	if n := digits(); n > 2 {
		return bad
	} else {
		s = s[n:]
	}
	if len(s) > 0 && s[0] == '.' {
		s = s[1:]
		n := digits()
		if n == 0 || n > 2 {
			return bad
		}
		s = s[n:]
	}
	if len(s) != 1 || strings.IndexByte("fegd", s[0]) < 0 {
		return bad
	}
	return nil
}

// IsZero says whether the template is absent.
func (t Template) IsZero() bool { return t.src == "" }

// String is the template's source.
func (t Template) String() string { return t.src }

// Uses says whether the template has the named placeholder.
func (t Template) Uses(name string) bool {
	for _, p := range t.parts {
		if p.name == name {
			return true
		}
	}
	return false
}

// Render fills the placeholders. A non-finite number is an error: it is
// never sent to an instrument.
func (t Template) Render(v Vars) (string, error) {
	var b strings.Builder
	for _, p := range t.parts {
		var x float64
		switch p.name {
		case "":
			b.WriteString(p.lit)
			continue
		case "axis":
			b.WriteString(v.Axis)
			continue
		case "value":
			x = v.Value
		case "gate_ms":
			x = v.GateMS
		case "gate_s":
			x = v.GateMS / 1000
		}
		if x != x || x > 1e300 || x < -1e300 {
			return "", fmt.Errorf("template %q: {%s} = %g is not a finite number", t.src, p.name, x)
		}
		if strings.HasSuffix(p.verb, "d") {
			if x > 9e18 || x < -9e18 {
				return "", fmt.Errorf("template %q: {%s} = %g does not fit an integer", t.src, p.name, x)
			}
			r := int64(x + 0.5)
			if x < 0 {
				r = -int64(-x + 0.5)
			}
			b.WriteString(fmt.Sprintf(p.verb, r))
			continue
		}
		b.WriteString(fmt.Sprintf(p.verb, x))
	}
	out := b.String()
	if strings.ContainsAny(out, "\r\n") {
		return "", fmt.Errorf("template %q renders a line break, which would split the command", t.src)
	}
	return out, nil
}

// templateNode decodes a template from a YAML string, checking the
// placeholders a command allows.
func decodeTemplate(d *yamlnode.Decoder, n *yaml.Node, key string, allowed ...string) Template {
	var s string
	d.Decode(n, key, &s)
	if s == "" {
		return Template{}
	}
	t, err := ParseTemplate(s, allowed...)
	if err != nil {
		d.Errorf(n, key, "%v", err)
		return Template{src: s} // given but bad: not reported missing too
	}
	return t
}

func quoteAll(s []string) string {
	q := make([]string, len(s))
	for i, x := range s {
		q[i] = strconv.Quote(x)
	}
	return strings.Join(q, ", ")
}
