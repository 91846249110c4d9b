// Package yamlnode decodes YAML nodes into Go structs strictly: unknown
// keys, wrong types and missing required fields are errors that name the
// file, the line and the key. The bench-file loader decodes the common part
// of a bench file with it, and each driver its own settings section, so a
// new driver needs no change to the loader.
//
// Fields are matched by the struct tag `bench:"key"` or `bench:"key,required"`
// (or, without one, by a `yaml:"key"` tag); untagged fields are left alone.
package yamlnode

import (
	"errors"
	"fmt"
	"math"
	"reflect"
	"strconv"
	"strings"
	"time"

	"go.yaml.in/yaml/v3"
)

// Error is one problem in a YAML file.
type Error struct {
	File string
	Line int
	// Key is the dotted path of the key ("instruments[1].limits.max_mm").
	Key string
	Msg string
}

func (e *Error) Error() string {
	if e.Key == "" {
		return fmt.Sprintf("%s:%d: %s", e.File, e.Line, e.Msg)
	}
	return fmt.Sprintf("%s:%d: key %s: %s", e.File, e.Line, e.Key, e.Msg)
}

// Unmarshaler is implemented by types that decode themselves from a node
// (a value that may be written as a string or as a mapping).
type Unmarshaler interface {
	DecodeNode(d *Decoder, n *yaml.Node, key string) error
}

// Decoder decodes nodes of one file and collects the errors.
type Decoder struct {
	File string
	errs []error
}

// Errorf records an error at node n for key.
func (d *Decoder) Errorf(n *yaml.Node, key, format string, a ...any) {
	line := 0
	if n != nil {
		line = n.Line
	}
	d.errs = append(d.errs, &Error{File: d.File, Line: line, Key: key, Msg: fmt.Sprintf(format, a...)})
}

// Err returns the errors recorded so far, joined, or nil.
func (d *Decoder) Err() error { return errors.Join(d.errs...) }

// Errors returns the recorded errors.
func (d *Decoder) Errors() []error { return d.errs }

// Key joins a parent key and a child.
func Key(parent, child string) string {
	if parent == "" {
		return child
	}
	return parent + "." + child
}

// Decode decodes n into out (a non-nil pointer). Errors are recorded in d.
func (d *Decoder) Decode(n *yaml.Node, key string, out any) {
	v := reflect.ValueOf(out)
	if v.Kind() != reflect.Pointer || v.IsNil() {
		panic("yamlnode: Decode needs a non-nil pointer")
	}
	d.value(n, key, v.Elem())
}

var (
	durationType  = reflect.TypeFor[time.Duration]()
	nodePtrType   = reflect.TypeFor[*yaml.Node]()
	unmarshalType = reflect.TypeFor[Unmarshaler]()
)

func describe(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.AliasNode:
		return "an alias"
	}
	switch n.ShortTag() {
	case "!!null":
		return "nothing (null)"
	case "!!int":
		return "integer " + n.Value
	case "!!float":
		return "number " + n.Value
	case "!!bool":
		return "boolean " + n.Value
	}
	return strconv.Quote(n.Value)
}

func (d *Decoder) value(n *yaml.Node, key string, v reflect.Value) {
	if n.Kind == yaml.DocumentNode && len(n.Content) == 1 {
		n = n.Content[0]
	}
	if n.Kind == yaml.AliasNode {
		d.Errorf(n, key, "aliases are not allowed in a bench file")
		return
	}
	if v.Type() == nodePtrType {
		v.Set(reflect.ValueOf(n))
		return
	}
	if v.CanAddr() && v.Addr().Type().Implements(unmarshalType) {
		if v.Kind() == reflect.Pointer && v.IsNil() {
			v.Set(reflect.New(v.Type().Elem()))
		}
		if err := v.Addr().Interface().(Unmarshaler).DecodeNode(d, n, key); err != nil {
			d.Errorf(n, key, "%v", err)
		}
		return
	}
	if v.Type() == durationType {
		if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!str" {
			d.Errorf(n, key, "want a duration such as \"250ms\" or \"2s\", got %s", describe(n))
			return
		}
		dur, err := time.ParseDuration(n.Value)
		if err != nil || dur < 0 {
			d.Errorf(n, key, "want a duration ≥ 0 such as \"250ms\" or \"2s\", got %q", n.Value)
			return
		}
		v.SetInt(int64(dur))
		return
	}
	switch v.Kind() {
	case reflect.Pointer:
		if n.ShortTag() == "!!null" {
			return
		}
		p := reflect.New(v.Type().Elem())
		d.value(n, key, p.Elem())
		v.Set(p)
	case reflect.Struct:
		d.structure(n, key, v)
	case reflect.Map:
		if n.Kind != yaml.MappingNode {
			d.Errorf(n, key, "want a mapping, got %s", describe(n))
			return
		}
		if v.Type().Key().Kind() != reflect.String {
			panic("yamlnode: map keys must be strings")
		}
		if v.IsNil() {
			v.Set(reflect.MakeMap(v.Type()))
		}
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, val := n.Content[i], n.Content[i+1]
			if k.Kind != yaml.ScalarNode {
				d.Errorf(k, key, "map keys must be plain words")
				continue
			}
			if v.MapIndex(reflect.ValueOf(k.Value).Convert(v.Type().Key())).IsValid() {
				d.Errorf(k, Key(key, k.Value), "given twice")
				continue
			}
			e := reflect.New(v.Type().Elem()).Elem()
			d.value(val, Key(key, k.Value), e)
			v.SetMapIndex(reflect.ValueOf(k.Value).Convert(v.Type().Key()), e)
		}
	case reflect.Slice:
		if n.Kind != yaml.SequenceNode {
			d.Errorf(n, key, "want a list, got %s", describe(n))
			return
		}
		s := reflect.MakeSlice(v.Type(), len(n.Content), len(n.Content))
		for i, c := range n.Content {
			d.value(c, fmt.Sprintf("%s[%d]", key, i), s.Index(i))
		}
		v.Set(s)
	case reflect.String:
		if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!str" {
			d.Errorf(n, key, "want a string, got %s (quote it)", describe(n))
			return
		}
		v.SetString(n.Value)
	case reflect.Bool:
		if n.Kind != yaml.ScalarNode || n.ShortTag() != "!!bool" {
			d.Errorf(n, key, "want true or false, got %s", describe(n))
			return
		}
		b, _ := strconv.ParseBool(strings.ToLower(n.Value))
		v.SetBool(b)
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64:
		var i int64
		err := errors.New("bad")
		if n.Kind == yaml.ScalarNode && n.ShortTag() == "!!int" {
			err = n.Decode(&i)
		}
		if err != nil || v.OverflowInt(i) {
			d.Errorf(n, key, "want an integer, got %s", describe(n))
			return
		}
		v.SetInt(i)
	case reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		var u uint64
		err := errors.New("bad")
		if n.Kind == yaml.ScalarNode && n.ShortTag() == "!!int" {
			err = n.Decode(&u)
		}
		if err != nil || v.OverflowUint(u) {
			d.Errorf(n, key, "want an integer ≥ 0, got %s", describe(n))
			return
		}
		v.SetUint(u)
	case reflect.Float32, reflect.Float64:
		var f float64
		err := errors.New("bad")
		if n.Kind == yaml.ScalarNode && (n.ShortTag() == "!!int" || n.ShortTag() == "!!float") {
			err = n.Decode(&f)
		}
		if err != nil || math.IsNaN(f) || math.IsInf(f, 0) {
			d.Errorf(n, key, "want a finite number, got %s", describe(n))
			return
		}
		v.SetFloat(f)
	default:
		panic("yamlnode: unsupported field type " + v.Type().String())
	}
}

type field struct {
	key      string
	required bool
	index    int
}

func fields(t reflect.Type) []field {
	var out []field
	for i := 0; i < t.NumField(); i++ {
		tag, ok := t.Field(i).Tag.Lookup("bench")
		if !ok {
			tag, ok = t.Field(i).Tag.Lookup("yaml")
		}
		if !ok || tag == "-" || !t.Field(i).IsExported() {
			continue
		}
		name, opt, _ := strings.Cut(tag, ",")
		out = append(out, field{key: name, required: opt == "required", index: i})
	}
	return out
}

// KnownKeys lists the keys a struct type accepts, for messages.
func KnownKeys(t reflect.Type) []string {
	var out []string
	for _, f := range fields(t) {
		out = append(out, f.key)
	}
	return out
}

func (d *Decoder) structure(n *yaml.Node, key string, v reflect.Value) {
	fs := fields(v.Type())
	if n.Kind != yaml.MappingNode {
		if n.ShortTag() == "!!null" {
			n = &yaml.Node{Kind: yaml.MappingNode, Line: n.Line}
		} else {
			d.Errorf(n, key, "want a mapping with keys %s, got %s", strings.Join(KnownKeys(v.Type()), ", "), describe(n))
			return
		}
	}
	seen := map[string]bool{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k, val := n.Content[i], n.Content[i+1]
		var f *field
		for j := range fs {
			if fs[j].key == k.Value {
				f = &fs[j]
			}
		}
		if f == nil {
			d.Errorf(k, Key(key, k.Value), "unknown key (allowed here: %s)", strings.Join(KnownKeys(v.Type()), ", "))
			continue
		}
		if seen[f.key] {
			d.Errorf(k, Key(key, k.Value), "given twice")
			continue
		}
		seen[f.key] = true
		d.value(val, Key(key, k.Value), v.Field(f.index))
	}
	for _, f := range fs {
		if f.required && !seen[f.key] {
			d.Errorf(n, Key(key, f.key), "missing (required)")
		}
	}
}

// Child returns the value node of key in mapping n, or n itself when the
// key is absent (so that an error about a missing key points at its parent).
func Child(n *yaml.Node, key string) *yaml.Node {
	if n != nil && n.Kind == yaml.DocumentNode && len(n.Content) == 1 {
		n = n.Content[0]
	}
	if n == nil || n.Kind != yaml.MappingNode {
		return n
	}
	for i := 0; i+1 < len(n.Content); i += 2 {
		if n.Content[i].Value == key {
			return n.Content[i+1]
		}
	}
	return n
}
