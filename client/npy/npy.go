// Package npy writes and reads arrays in NumPy's open .npy format (version
// 1.0) and bundles several of them as a .npz (a zip archive of .npy files),
// so that scans exported by gliss load with numpy.load.
//
// Only what gliss exports is supported: little-endian float64 ('<f8') and
// uint64 ('<u8') arrays in C order, of any shape.
//
// Format, from NumPy's format specification (numpy/lib/format.py, "NPY
// format version 1.0"): the magic string "\x93NUMPY", one byte major and one
// byte minor version, a little-endian uint16 header length, then an ASCII
// Python dict literal with the keys 'descr', 'fortran_order' and 'shape',
// padded with spaces and ended by '\n' so that the data starts at a multiple
// of 64 bytes; then the raw data.
package npy

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
)

// Magic starts every .npy file.
const Magic = "\x93NUMPY"

// Descriptors of the supported element types.
const (
	Float64 = "<f8"
	Uint64  = "<u8"
)

// maxHeaderLen is the largest header of format version 1.0 (uint16 length).
const maxHeaderLen = math.MaxUint16

// maxElements bounds a shape read from outside input (2^31 elements, 16 GiB of f8).
const maxElements = 1 << 31

// Header is the metadata of one array.
type Header struct {
	Descr        string // "<f8" or "<u8"
	FortranOrder bool   // always false for arrays gliss writes
	Shape        []int
}

// Elements is the number of elements the shape holds.
func (h Header) Elements() int {
	n := 1
	for _, d := range h.Shape {
		n *= d
	}
	return n
}

func checkShape(shape []int) error {
	n := 1
	for i, d := range shape {
		if d < 0 {
			return fmt.Errorf("npy: shape[%d] = %d, must be ≥ 0", i, d)
		}
		if d > 0 && n > maxElements/d {
			return fmt.Errorf("npy: shape %v holds more than %d elements", shape, maxElements)
		}
		n *= d
	}
	return nil
}

// shapeLiteral formats a shape as a Python tuple: (), (3,), (3, 4).
func shapeLiteral(shape []int) string {
	switch len(shape) {
	case 0:
		return "()"
	case 1:
		return "(" + strconv.Itoa(shape[0]) + ",)"
	}
	parts := make([]string, len(shape))
	for i, d := range shape {
		parts[i] = strconv.Itoa(d)
	}
	return "(" + strings.Join(parts, ", ") + ")"
}

// EncodeHeader returns the magic, version, length and padded header dict
// of an array: everything before its data.
func EncodeHeader(h Header) ([]byte, error) {
	if h.Descr != Float64 && h.Descr != Uint64 {
		return nil, fmt.Errorf("npy: descr %q: only %q and %q are supported", h.Descr, Float64, Uint64)
	}
	if err := checkShape(h.Shape); err != nil {
		return nil, err
	}
	fo := "False"
	if h.FortranOrder {
		fo = "True"
	}
	dict := fmt.Sprintf("{'descr': '%s', 'fortran_order': %s, 'shape': %s, }", h.Descr, fo, shapeLiteral(h.Shape))
	const pre = len(Magic) + 2 + 2
	total := pre + len(dict) + 1 // + '\n'
	pad := (64 - total%64) % 64
	hl := len(dict) + pad + 1
	if hl > maxHeaderLen {
		return nil, fmt.Errorf("npy: header of %d bytes does not fit version 1.0 (at most %d)", hl, maxHeaderLen)
	}
	out := make([]byte, 0, pre+hl)
	out = append(out, Magic...)
	out = append(out, 1, 0)
	out = binary.LittleEndian.AppendUint16(out, uint16(hl))
	out = append(out, dict...)
	out = append(out, strings.Repeat(" ", pad)...)
	return append(out, '\n'), nil
}

// WriteFloat64 writes a float64 array of the given shape (C order).
func WriteFloat64(w io.Writer, shape []int, data []float64) error {
	h := Header{Descr: Float64, Shape: shape}
	if err := checkShape(shape); err != nil {
		return err
	}
	if h.Elements() != len(data) {
		return fmt.Errorf("npy: shape %v holds %d elements, data has %d", shape, h.Elements(), len(data))
	}
	hdr, err := EncodeHeader(h)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	bw.Write(hdr)
	var b [8]byte
	for _, v := range data {
		binary.LittleEndian.PutUint64(b[:], math.Float64bits(v))
		bw.Write(b[:])
	}
	return bw.Flush()
}

// WriteUint64 writes a uint64 array of the given shape (C order).
func WriteUint64(w io.Writer, shape []int, data []uint64) error {
	h := Header{Descr: Uint64, Shape: shape}
	if err := checkShape(shape); err != nil {
		return err
	}
	if h.Elements() != len(data) {
		return fmt.Errorf("npy: shape %v holds %d elements, data has %d", shape, h.Elements(), len(data))
	}
	hdr, err := EncodeHeader(h)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	bw.Write(hdr)
	var b [8]byte
	for _, v := range data {
		binary.LittleEndian.PutUint64(b[:], v)
		bw.Write(b[:])
	}
	return bw.Flush()
}

// ReadHeader reads the magic, version and header dict of a .npy stream,
// leaving r at the first data byte. Versions 1.0, 2.0 and 3.0 are read
// (2.0 and 3.0 differ only in a uint32 header length).
func ReadHeader(r io.Reader) (Header, error) {
	var pre [8]byte
	if _, err := io.ReadFull(r, pre[:]); err != nil {
		return Header{}, fmt.Errorf("npy: read magic: %w", err)
	}
	if string(pre[:6]) != Magic {
		return Header{}, fmt.Errorf("npy: not a .npy file (magic %q, want %q)", pre[:6], Magic)
	}
	var hl int
	switch pre[6] {
	case 1:
		var b [2]byte
		if _, err := io.ReadFull(r, b[:]); err != nil {
			return Header{}, fmt.Errorf("npy: read header length: %w", err)
		}
		hl = int(binary.LittleEndian.Uint16(b[:]))
	case 2, 3:
		var b [4]byte
		if _, err := io.ReadFull(r, b[:]); err != nil {
			return Header{}, fmt.Errorf("npy: read header length: %w", err)
		}
		n := binary.LittleEndian.Uint32(b[:])
		if n > 1<<20 {
			return Header{}, fmt.Errorf("npy: header length %d, at most %d supported", n, 1<<20)
		}
		hl = int(n)
	default:
		return Header{}, fmt.Errorf("npy: format version %d.%d, only 1.0 to 3.0 are known", pre[6], pre[7])
	}
	buf := make([]byte, hl)
	if _, err := io.ReadFull(r, buf); err != nil {
		return Header{}, fmt.Errorf("npy: read header of %d bytes: %w", hl, err)
	}
	return ParseHeaderDict(string(buf))
}

// ParseHeaderDict parses the header dict literal of a .npy file:
// {'descr': '<f8', 'fortran_order': False, 'shape': (3, 4), }
// (keys in any order, trailing spaces and newline allowed).
func ParseHeaderDict(s string) (Header, error) {
	p := &dictParser{s: strings.TrimRight(s, " \n\x00")}
	var h Header
	seen := map[string]bool{}
	p.space()
	if !p.eat('{') {
		return h, p.errf("want '{'")
	}
	for {
		p.space()
		if p.eat('}') {
			break
		}
		key, err := p.str()
		if err != nil {
			return h, err
		}
		p.space()
		if !p.eat(':') {
			return h, p.errf("want ':' after key %q", key)
		}
		p.space()
		if seen[key] {
			return h, p.errf("key %q given twice", key)
		}
		seen[key] = true
		switch key {
		case "descr":
			if h.Descr, err = p.str(); err != nil {
				return h, err
			}
		case "fortran_order":
			switch {
			case p.word("True"):
				h.FortranOrder = true
			case p.word("False"):
				h.FortranOrder = false
			default:
				return h, p.errf("fortran_order: want True or False")
			}
		case "shape":
			if h.Shape, err = p.tuple(); err != nil {
				return h, err
			}
		default:
			return h, p.errf("unknown key %q (want descr, fortran_order, shape)", key)
		}
		p.space()
		if p.eat(',') {
			continue
		}
		p.space()
		if p.eat('}') {
			break
		}
		return h, p.errf("want ',' or '}'")
	}
	p.space()
	if p.i != len(p.s) {
		return h, p.errf("text after the dict")
	}
	for _, k := range []string{"descr", "fortran_order", "shape"} {
		if !seen[k] {
			return h, fmt.Errorf("npy: header lacks %q", k)
		}
	}
	if h.Shape == nil {
		h.Shape = []int{}
	}
	return h, checkShape(h.Shape)
}

type dictParser struct {
	s string
	i int
}

func (p *dictParser) errf(format string, a ...any) error {
	return fmt.Errorf("npy: header dict at byte %d: %s", p.i, fmt.Sprintf(format, a...))
}

func (p *dictParser) space() {
	for p.i < len(p.s) && (p.s[p.i] == ' ' || p.s[p.i] == '\t' || p.s[p.i] == '\n') {
		p.i++
	}
}

func (p *dictParser) eat(c byte) bool {
	if p.i < len(p.s) && p.s[p.i] == c {
		p.i++
		return true
	}
	return false
}

func (p *dictParser) word(w string) bool {
	if strings.HasPrefix(p.s[p.i:], w) {
		p.i += len(w)
		return true
	}
	return false
}

// str reads a quoted string without escapes ('…' or "…").
func (p *dictParser) str() (string, error) {
	if p.i >= len(p.s) || (p.s[p.i] != '\'' && p.s[p.i] != '"') {
		return "", p.errf("want a quoted string")
	}
	q := p.s[p.i]
	end := strings.IndexByte(p.s[p.i+1:], q)
	if end < 0 {
		return "", p.errf("unterminated string")
	}
	v := p.s[p.i+1 : p.i+1+end]
	if strings.ContainsRune(v, '\\') {
		return "", p.errf("escapes in strings are not supported")
	}
	p.i += end + 2
	return v, nil
}

// tuple reads (), (3,), (3, 4) or (3, 4,).
func (p *dictParser) tuple() ([]int, error) {
	if !p.eat('(') {
		return nil, p.errf("shape: want '('")
	}
	out := []int{}
	for {
		p.space()
		if p.eat(')') {
			if len(out) == 1 && !strings.HasSuffix(strings.TrimRight(p.s[:p.i-1], " "), ",") {
				return nil, p.errf("shape: a one-element tuple needs a trailing comma")
			}
			return out, nil
		}
		j := p.i
		for p.i < len(p.s) && p.s[p.i] >= '0' && p.s[p.i] <= '9' {
			p.i++
		}
		if j == p.i {
			return nil, p.errf("shape: want a dimension")
		}
		if p.i-j > 12 {
			return nil, p.errf("shape: dimension %s too large", p.s[j:p.i])
		}
		d, _ := strconv.Atoi(p.s[j:p.i])
		out = append(out, d)
		if len(out) > 32 {
			return nil, p.errf("shape: more than 32 dimensions")
		}
		p.space()
		if p.eat(',') {
			continue
		}
		p.space()
		if p.eat(')') {
			if len(out) == 1 {
				return nil, p.errf("shape: a one-element tuple needs a trailing comma")
			}
			return out, nil
		}
		return nil, p.errf("shape: want ',' or ')'")
	}
}

// Array is one array read back.
type Array struct {
	Header
	F64 []float64 // Descr "<f8"
	U64 []uint64  // Descr "<u8"
}

// Read reads a whole .npy array of a supported type.
func Read(r io.Reader) (*Array, error) {
	h, err := ReadHeader(r)
	if err != nil {
		return nil, err
	}
	if h.Descr != Float64 && h.Descr != Uint64 {
		return nil, fmt.Errorf("npy: descr %q: only %q and %q are supported", h.Descr, Float64, Uint64)
	}
	if h.FortranOrder {
		return nil, errors.New("npy: fortran_order True is not supported")
	}
	n := h.Elements()
	a := &Array{Header: h}
	br := bufio.NewReader(r)
	var b [8]byte
	// Grow as data arrives, so that a forged shape cannot allocate much.
	for i := 0; i < n; i++ {
		if _, err := io.ReadFull(br, b[:]); err != nil {
			return nil, fmt.Errorf("npy: element %d of %d: %w", i, n, err)
		}
		u := binary.LittleEndian.Uint64(b[:])
		if h.Descr == Float64 {
			a.F64 = append(a.F64, math.Float64frombits(u))
		} else {
			a.U64 = append(a.U64, u)
		}
	}
	return a, nil
}
