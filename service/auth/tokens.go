// Package auth is glissd's access control: bearer tokens from a token file,
// each with a role (observe or operate), checked by gRPC interceptors, and
// the audit record of every operate call.
//
// Token file format (one token a line):
//
//	# comment lines and blank lines are ignored
//	NAME ROLE TOKEN
//
// NAME is who the token belongs to as the audit log shows it (letters,
// digits, '.', '_', '-', '@'; at most 64 bytes), ROLE is observe or
// operate, TOKEN is the secret (at least 16 and at most 512 printable
// non-space ASCII bytes). Fields are separated by spaces or tabs. Names and
// tokens must be unique. Example:
//
//	night-watch observe 3f9c0a7d1e2b4c6a8f0e1d2c3b4a5968
//	anna        operate b1e0c8d7f6a5948372615049382716a5
package auth

import (
	"bufio"
	"bytes"
	"crypto/sha256"
	"crypto/subtle"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
)

// Role is what a token may do.
type Role int

// The roles. Operate includes everything Observe may do.
const (
	// RoleNone: not a role (no token, or an unknown one).
	RoleNone Role = iota
	// Observe: read, watch and export.
	Observe
	// Operate: also submit, pause, resume, cancel and set instruments.
	Operate
)

func (r Role) String() string {
	switch r {
	case Observe:
		return "observe"
	case Operate:
		return "operate"
	}
	return "none"
}

// ParseRole parses "observe" or "operate".
func ParseRole(s string) (Role, error) {
	switch s {
	case "observe":
		return Observe, nil
	case "operate":
		return Operate, nil
	}
	return RoleNone, fmt.Errorf("role %q: use observe or operate", s)
}

// Limits of the token file.
const (
	MinTokenBytes = 16
	MaxTokenBytes = 512
	MaxNameBytes  = 64
	maxFileBytes  = 1 << 20
	maxLineBytes  = 4096
)

// Identity is who a token belongs to.
type Identity struct {
	Name string
	Role Role
}

type entry struct {
	Identity
	sum [sha256.Size]byte
}

// Tokens is a parsed token file.
type Tokens struct {
	entries []entry
}

// Len is the number of tokens.
func (t *Tokens) Len() int { return len(t.entries) }

// Lookup returns the identity of a presented token. Every entry is compared
// in constant time (on SHA-256 digests), so the time taken does not tell how
// close a guess was.
func (t *Tokens) Lookup(token string) (Identity, bool) {
	sum := sha256.Sum256([]byte(token))
	var found Identity
	ok := 0
	for i := range t.entries {
		if subtle.ConstantTimeCompare(sum[:], t.entries[i].sum[:]) == 1 {
			found, ok = t.entries[i].Identity, 1
		}
	}
	return found, ok == 1
}

// LoadTokens reads a token file. It refuses a file that others than its
// owner may read (the tokens are secrets).
func LoadTokens(path string) (*Tokens, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("token file: %w", err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("token file %s: %w", path, err)
	}
	if perm := fi.Mode().Perm(); perm&0o077 != 0 {
		return nil, fmt.Errorf("token file %s: mode %04o lets others read the tokens: chmod 600 %s", path, perm, path)
	}
	t, err := ParseTokens(f)
	if err != nil {
		return nil, fmt.Errorf("token file %s: %w", path, err)
	}
	return t, nil
}

// ParseTokens parses the token file format (see the package comment). A
// file without any token is an error.
func ParseTokens(r io.Reader) (*Tokens, error) {
	data, err := io.ReadAll(io.LimitReader(r, maxFileBytes+1))
	if err != nil {
		return nil, err
	}
	if len(data) > maxFileBytes {
		return nil, fmt.Errorf("larger than %d bytes", maxFileBytes)
	}
	t := &Tokens{}
	names := map[string]int{}
	sums := map[[sha256.Size]byte]int{}
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 0, 256), maxLineBytes)
	line := 0
	for sc.Scan() {
		line++
		text := strings.TrimSpace(sc.Text())
		if text == "" || strings.HasPrefix(text, "#") {
			continue
		}
		f := strings.Fields(text)
		if len(f) != 3 {
			return nil, fmt.Errorf("line %d: %d fields, want 3: NAME ROLE TOKEN", line, len(f))
		}
		name, roleText, tok := f[0], f[1], f[2]
		if err := checkName(name); err != nil {
			return nil, fmt.Errorf("line %d: %w", line, err)
		}
		role, err := ParseRole(roleText)
		if err != nil {
			return nil, fmt.Errorf("line %d: %w", line, err)
		}
		if err := checkToken(tok); err != nil {
			return nil, fmt.Errorf("line %d (%s): %w", line, name, err)
		}
		if prev, dup := names[name]; dup {
			return nil, fmt.Errorf("line %d: name %q already used on line %d", line, name, prev)
		}
		sum := sha256.Sum256([]byte(tok))
		if prev, dup := sums[sum]; dup {
			return nil, fmt.Errorf("line %d (%s): same token as line %d: give every person their own token", line, name, prev)
		}
		names[name], sums[sum] = line, line
		t.entries = append(t.entries, entry{Identity: Identity{Name: name, Role: role}, sum: sum})
	}
	if err := sc.Err(); err != nil {
		if errors.Is(err, bufio.ErrTooLong) {
			return nil, fmt.Errorf("line %d: longer than %d bytes", line+1, maxLineBytes)
		}
		return nil, err
	}
	if len(t.entries) == 0 {
		return nil, errors.New("no token in the file: add lines NAME ROLE TOKEN (ROLE observe or operate)")
	}
	return t, nil
}

func checkName(name string) error {
	if len(name) > MaxNameBytes {
		return fmt.Errorf("name %.20q…: %d bytes, allowed 1 … %d", name, len(name), MaxNameBytes)
	}
	for _, c := range []byte(name) {
		ok := c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9' || c == '.' || c == '_' || c == '-' || c == '@'
		if !ok {
			return fmt.Errorf("name %q: character %q not allowed (letters, digits, . _ - @)", name, c)
		}
	}
	return nil
}

func checkToken(tok string) error {
	if len(tok) < MinTokenBytes || len(tok) > MaxTokenBytes {
		return fmt.Errorf("token of %d bytes, allowed %d … %d (e.g. openssl rand -hex 24)", len(tok), MinTokenBytes, MaxTokenBytes)
	}
	for i := 0; i < len(tok); i++ {
		if c := tok[i]; c <= ' ' || c > '~' {
			return fmt.Errorf("token: byte %d is %q: only printable ASCII without spaces", i, c)
		}
	}
	return nil
}
