package auth

import (
	"fmt"
	"strconv"
	"strings"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
)

// Describe renders a request's key fields for the audit log: its scalar
// fields (and those of its message fields, one level down) as
// name=value, in field order, and, for a successful call whose response
// carries a scan or an instrument, the response's id or name after "→".
// Repeated fields are left out (a spec's axes are in the scan record).
func Describe(req, resp any) string {
	var parts []string
	if m, ok := req.(proto.Message); ok && m != nil {
		parts = scalars(parts, "", m.ProtoReflect(), 1)
	}
	if m, ok := resp.(proto.Message); ok && m != nil {
		if k := key(m.ProtoReflect(), "", 1); k != "" {
			parts = append(parts, "→ "+k)
		}
	}
	return strings.Join(parts, " ")
}

func scalars(parts []string, prefix string, m protoreflect.Message, depth int) []string {
	if !m.IsValid() {
		return parts
	}
	fields := m.Descriptor().Fields()
	for i := 0; i < fields.Len(); i++ {
		fd := fields.Get(i)
		if !m.Has(fd) || fd.IsList() || fd.IsMap() {
			continue
		}
		name := prefix + string(fd.Name())
		v := m.Get(fd)
		switch fd.Kind() {
		case protoreflect.MessageKind, protoreflect.GroupKind:
			if depth > 0 {
				parts = scalars(parts, name+".", v.Message(), depth-1)
			}
		default:
			parts = append(parts, name+"="+scalar(fd, v))
		}
	}
	return parts
}

func scalar(fd protoreflect.FieldDescriptor, v protoreflect.Value) string {
	switch fd.Kind() {
	case protoreflect.StringKind:
		return strconv.Quote(v.String())
	case protoreflect.BytesKind:
		return fmt.Sprintf("(%d bytes)", len(v.Bytes()))
	case protoreflect.EnumKind:
		if ev := fd.Enum().Values().ByNumber(v.Enum()); ev != nil {
			return string(ev.Name())
		}
		return strconv.Itoa(int(v.Enum()))
	case protoreflect.DoubleKind, protoreflect.FloatKind:
		return strconv.FormatFloat(v.Float(), 'g', -1, 64)
	}
	return v.String()
}

// key finds a response's "id" (or, failing that, "name") field, at the top
// level or one message down.
func key(m protoreflect.Message, prefix string, depth int) string {
	if !m.IsValid() {
		return ""
	}
	fields := m.Descriptor().Fields()
	for _, n := range []protoreflect.Name{"id", "name"} {
		if fd := fields.ByName(n); fd != nil && fd.Kind() == protoreflect.StringKind && !fd.IsList() && m.Has(fd) {
			return prefix + string(n) + "=" + strconv.Quote(m.Get(fd).String())
		}
	}
	if depth == 0 {
		return ""
	}
	for i := 0; i < fields.Len(); i++ {
		fd := fields.Get(i)
		if fd.Kind() == protoreflect.MessageKind && !fd.IsList() && !fd.IsMap() && m.Has(fd) {
			if k := key(m.Get(fd).Message(), prefix+string(fd.Name())+".", depth-1); k != "" {
				return k
			}
		}
	}
	return ""
}
