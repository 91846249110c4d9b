package npy

import (
	"archive/zip"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strings"
)

// Sink receives named arrays: a directory of NAME.npy files or a .npz.
type Sink interface {
	// Create returns a writer for the array NAME (without ".npy"); the
	// writer must be done with before the next Create.
	Create(name string) (io.Writer, error)
	// Close finishes the bundle.
	Close() error
}

var nameRE = regexp.MustCompile(`^[A-Za-z_][A-Za-z0-9_]{0,63}$`)

// CheckName accepts array names that are Python identifiers (so that
// np.load(...)["name"] and attribute-style access both work).
func CheckName(name string) error {
	if !nameRE.MatchString(name) {
		return fmt.Errorf("npy: array name %q: use letters, digits and _ (a Python identifier, ≤ 64 characters)", name)
	}
	return nil
}

// NPZ writes a .npz: a zip archive with one NAME.npy per array, stored
// uncompressed as numpy.savez does.
type NPZ struct {
	zw   *zip.Writer
	seen map[string]bool
}

// NewNPZ starts a .npz on w.
func NewNPZ(w io.Writer) *NPZ { return &NPZ{zw: zip.NewWriter(w), seen: map[string]bool{}} }

// Create implements Sink.
func (z *NPZ) Create(name string) (io.Writer, error) {
	if err := CheckName(name); err != nil {
		return nil, err
	}
	if z.seen[name] {
		return nil, fmt.Errorf("npy: array %q written twice", name)
	}
	z.seen[name] = true
	return z.zw.CreateHeader(&zip.FileHeader{Name: name + ".npy", Method: zip.Store})
}

// Close implements Sink.
func (z *NPZ) Close() error { return z.zw.Close() }

// Dir writes NAME.npy files into a directory.
type Dir struct {
	path string
	cur  *os.File
	seen map[string]bool
}

// NewDir creates (if needed) the directory path.
func NewDir(path string) (*Dir, error) {
	if err := os.MkdirAll(path, 0o755); err != nil {
		return nil, fmt.Errorf("npy: directory %s: %w", path, err)
	}
	return &Dir{path: path, seen: map[string]bool{}}, nil
}

// Create implements Sink.
func (d *Dir) Create(name string) (io.Writer, error) {
	if err := CheckName(name); err != nil {
		return nil, err
	}
	if d.seen[name] {
		return nil, fmt.Errorf("npy: array %q written twice", name)
	}
	d.seen[name] = true
	if err := d.closeCur(); err != nil {
		return nil, err
	}
	f, err := os.Create(filepath.Join(d.path, name+".npy"))
	if err != nil {
		return nil, fmt.Errorf("npy: %w", err)
	}
	d.cur = f
	return f, nil
}

func (d *Dir) closeCur() error {
	if d.cur == nil {
		return nil
	}
	f := d.cur
	d.cur = nil
	if err := f.Sync(); err != nil {
		f.Close()
		return fmt.Errorf("npy: %s: %w", f.Name(), err)
	}
	return f.Close()
}

// Close implements Sink.
func (d *Dir) Close() error { return d.closeCur() }

// IsNPZPath reports whether path names a .npz file (else it is a directory).
func IsNPZPath(path string) bool {
	ext := strings.ToLower(filepath.Ext(path))
	return ext == ".npz" || ext == ".zip"
}
