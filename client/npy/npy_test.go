package npy

import (
	"bytes"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// python returns /usr/bin/python3 if it has NumPy; it skips the test
// otherwise, unless CI=true (CI installs python3-numpy).
func python(t *testing.T) string {
	t.Helper()
	const py = "/usr/bin/python3"
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatalf("%s with numpy is required in CI: %v", py, err)
		}
		t.Skipf("%s without numpy: %v", py, err)
	}
	return py
}

func TestHeaderLayout(t *testing.T) {
	for _, shape := range [][]int{{}, {0}, {3}, {41, 51}, {2, 3, 4}, {40000, 50000}} {
		hdr, err := EncodeHeader(Header{Descr: Float64, Shape: shape})
		if err != nil {
			t.Fatal(err)
		}
		// NumPy format spec: the data starts at a multiple of 64 bytes and
		// the header ends with '\n' (numpy/lib/format.py, version 1.0).
		if len(hdr)%64 != 0 || hdr[len(hdr)-1] != '\n' || !bytes.HasPrefix(hdr, []byte(Magic+"\x01\x00")) {
			t.Errorf("shape %v: header %q (%d bytes)", shape, hdr, len(hdr))
		}
		h, err := ReadHeader(bytes.NewReader(hdr))
		if err != nil {
			t.Fatalf("shape %v: read back: %v", shape, err)
		}
		if h.Descr != Float64 || h.FortranOrder || !reflect.DeepEqual(h.Shape, shape) {
			t.Errorf("shape %v: read back %+v", shape, h)
		}
	}
	if _, err := EncodeHeader(Header{Descr: "<i4", Shape: []int{1}}); err == nil {
		t.Error("descr <i4 accepted")
	}
	if err := WriteFloat64(&bytes.Buffer{}, []int{2, 2}, []float64{1, 2, 3}); err == nil {
		t.Error("shape (2, 2) with 3 elements accepted")
	}
}

func TestParseHeaderDictRejects(t *testing.T) {
	for _, s := range []string{
		"",
		"{'descr': '<f8', 'fortran_order': False}",
		"{'descr': '<f8', 'fortran_order': False, 'shape': (3), }",
		"{'descr': '<f8', 'fortran_order': Maybe, 'shape': (3,), }",
		"{'descr': '<f8', 'descr': '<f8', 'fortran_order': False, 'shape': (3,), }",
		"{'descr': '<f8', 'fortran_order': False, 'shape': (-3,), }",
		"{'descr': '<f8', 'fortran_order': False, 'shape': (3,), } x",
		"{'descr': '<f8', 'fortran_order': False, 'shape': (100000, 100000, 100000), }",
	} {
		if h, err := ParseHeaderDict(s); err == nil {
			t.Errorf("%q accepted as %+v", s, h)
		}
	}
}

func TestRoundTrip(t *testing.T) {
	data := []float64{0, -1.5, math.NaN(), math.Inf(1), 1e-300, 6}
	var b bytes.Buffer
	if err := WriteFloat64(&b, []int{2, 3}, data); err != nil {
		t.Fatal(err)
	}
	a, err := Read(&b)
	if err != nil {
		t.Fatal(err)
	}
	for i := range data {
		if math.Float64bits(a.F64[i]) != math.Float64bits(data[i]) {
			t.Errorf("element %d: %v, want %v", i, a.F64[i], data[i])
		}
	}
	b.Reset()
	u := []uint64{0, 1, math.MaxUint64}
	if err := WriteUint64(&b, []int{3}, u); err != nil {
		t.Fatal(err)
	}
	if a, err = Read(&b); err != nil || !reflect.DeepEqual(a.U64, u) {
		t.Errorf("uint64 round trip: %v, %v", a, err)
	}
	// A truncated file is an error, not a short array.
	b.Reset()
	WriteUint64(&b, []int{3}, u)
	if _, err := Read(bytes.NewReader(b.Bytes()[:b.Len()-1])); err == nil {
		t.Error("truncated data accepted")
	}
}

// TestNumPyReadsOurs: NumPy itself (the reference reader) loads a .npy and
// a .npz written here and sees the same shapes, types and values.
func TestNumPyReadsOurs(t *testing.T) {
	py := python(t)
	dir := t.TempDir()
	f, err := os.Create(filepath.Join(dir, "a.npy"))
	if err != nil {
		t.Fatal(err)
	}
	if err := WriteFloat64(f, []int{2, 3}, []float64{1, 2, 3, 4, 5, math.NaN()}); err != nil {
		t.Fatal(err)
	}
	f.Close()
	zf, err := os.Create(filepath.Join(dir, "b.npz"))
	if err != nil {
		t.Fatal(err)
	}
	z := NewNPZ(zf)
	w, err := z.Create("counts_xx")
	if err != nil {
		t.Fatal(err)
	}
	if err := WriteUint64(w, []int{4}, []uint64{7, 8, 9, math.MaxUint64}); err != nil {
		t.Fatal(err)
	}
	w, _ = z.Create("gdd_ps2")
	if err := WriteFloat64(w, []int{1}, []float64{-20}); err != nil {
		t.Fatal(err)
	}
	if _, err := z.Create("counts_xx"); err == nil {
		t.Error("second array of the same name accepted")
	}
	if err := z.Close(); err != nil {
		t.Fatal(err)
	}
	zf.Close()
	script := `
import sys, numpy as np
a = np.load(sys.argv[1])
assert a.dtype == np.float64 and a.shape == (2, 3), (a.dtype, a.shape)
assert a[1, 1] == 5 and np.isnan(a[1, 2]) and a[0, 2] == 3
z = np.load(sys.argv[2])
assert sorted(z.files) == ["counts_xx", "gdd_ps2"], z.files
c = z["counts_xx"]
assert c.dtype == np.uint64 and c.shape == (4,) and int(c[3]) == 2**64 - 1 and int(c[0]) == 7
assert z["gdd_ps2"].tolist() == [-20.0]
print("ok")
`
	out, err := exec.Command(py, "-c", script, filepath.Join(dir, "a.npy"), filepath.Join(dir, "b.npz")).CombinedOutput()
	if err != nil || strings.TrimSpace(string(out)) != "ok" {
		t.Fatalf("numpy load: %v\n%s", err, out)
	}
}

// TestReadNumPys: headers and data written by numpy.save read back here.
func TestReadNumPys(t *testing.T) {
	py := python(t)
	dir := t.TempDir()
	script := `
import sys, numpy as np
np.save(sys.argv[1] + "/f.npy", np.arange(12, dtype="<f8").reshape(3, 4) / 4)
np.save(sys.argv[1] + "/u.npy", np.array([5, 2**63], dtype="<u8"))
np.save(sys.argv[1] + "/s.npy", np.float64(2.5))
`
	if out, err := exec.Command(py, "-c", script, dir).CombinedOutput(); err != nil {
		t.Fatalf("numpy save: %v\n%s", err, out)
	}
	read := func(name string) *Array {
		f, err := os.Open(filepath.Join(dir, name))
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		a, err := Read(f)
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		return a
	}
	if a := read("f.npy"); !reflect.DeepEqual(a.Shape, []int{3, 4}) || a.F64[5] != 1.25 || a.F64[11] != 2.75 {
		t.Errorf("f.npy: %+v", a)
	}
	if a := read("u.npy"); !reflect.DeepEqual(a.Shape, []int{2}) || a.U64[1] != 1<<63 {
		t.Errorf("u.npy: %+v", a)
	}
	if a := read("s.npy"); len(a.Shape) != 0 || len(a.F64) != 1 || a.F64[0] != 2.5 {
		t.Errorf("s.npy: %+v", a)
	}
}

func TestDirSink(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "out")
	d, err := NewDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	w, err := d.Create("power_uw")
	if err != nil {
		t.Fatal(err)
	}
	WriteFloat64(w, []int{2}, []float64{1, 4})
	if _, err := d.Create("../escape"); err == nil {
		t.Error("name ../escape accepted")
	}
	if err := d.Close(); err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(filepath.Join(dir, "power_uw.npy"))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if a, err := Read(f); err != nil || a.F64[1] != 4 {
		t.Errorf("read back: %v %v", a, err)
	}
	if !IsNPZPath("x.npz") || IsNPZPath("outdir") {
		t.Error("IsNPZPath")
	}
}

func FuzzReadHeader(f *testing.F) {
	for _, shape := range [][]int{{}, {3}, {41, 51}} {
		h, _ := EncodeHeader(Header{Descr: Float64, Shape: shape})
		f.Add(h)
	}
	f.Add([]byte(Magic + "\x02\x00\x10\x00\x00\x00{'shape': (1,), 'descr': '<u8', 'fortran_order': True}"))
	f.Add([]byte(Magic + "\x01\x00\xff\xff{"))
	f.Fuzz(func(t *testing.T, b []byte) {
		h, err := ReadHeader(bytes.NewReader(b))
		if err != nil {
			return
		}
		if h.Descr != Float64 && h.Descr != Uint64 {
			return
		}
		// Whatever parses re-encodes and parses to the same header.
		enc, err := EncodeHeader(h)
		if err != nil {
			t.Fatalf("%+v parsed but does not encode: %v", h, err)
		}
		h2, err := ReadHeader(bytes.NewReader(enc))
		if err != nil || !reflect.DeepEqual(h, h2) {
			t.Fatalf("round trip %+v → %q → %+v, %v", h, enc, h2, err)
		}
		// Reading data must not panic or allocate for a forged shape.
		Read(bytes.NewReader(b))
	})
}

// BenchmarkWriteFloat64 writes a 201 × 201 map of counts (one channel of
// a large power × chirp map) to memory.
func BenchmarkWriteFloat64(b *testing.B) {
	data := make([]float64, 201*201)
	for i := range data {
		data[i] = float64(i % 997)
	}
	var buf bytes.Buffer
	b.SetBytes(int64(8 * len(data)))
	b.ReportAllocs()
	for b.Loop() {
		buf.Reset()
		if err := WriteFloat64(&buf, []int{201, 201}, data); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkRead(b *testing.B) {
	data := make([]float64, 201*201)
	var buf bytes.Buffer
	WriteFloat64(&buf, []int{201, 201}, data)
	raw := buf.Bytes()
	b.SetBytes(int64(len(raw)))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Read(bytes.NewReader(raw)); err != nil {
			b.Fatal(err)
		}
	}
}
