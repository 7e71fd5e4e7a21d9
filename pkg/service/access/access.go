// Package access is the access model of the Mottle service: principals
// holding roles in projects, and the token file that keeps, for each
// bearer token, only its SHA-256 digest with the principal, the grants,
// the creation time and an optional expiry.
//
// Tokens are 32 random bytes from crypto/rand, written as "mt_" and 43
// base64url characters, and shown once when created. Because a token has
// 256 bits of entropy, an unsalted SHA-256 digest is enough to keep it
// (common practice for random API tokens: no dictionary or brute-force
// search can reach it, so a slow salted hash would add nothing).
//
// The token file holds one JSON object a line (JSON lines); blank lines
// and lines starting with # are skipped:
//
//	{"sha256":"<64 hex digits>","principal":"rig-3","grants":[{"project":"lab-a","role":"submit"}],"created":"2026-12-02T00:00:00Z"}
package access

import (
	"bufio"
	"bytes"
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"time"
)

// Role is what a principal may do in a project. Roles are ordered: each
// includes the ones before it.
type Role int

const (
	// None: no access.
	None Role = iota
	// Read: list and download.
	Read
	// Submit: Read, plus create analyses and series, post frames and
	// cancel one's own jobs.
	Submit
	// Manage: Submit, plus delete, rename and cancel anything in the
	// project, and read the audit trail.
	Manage
)

var roleNames = []string{"none", "read", "submit", "manage"}

// String returns the role's name.
func (r Role) String() string {
	if r < 0 || int(r) >= len(roleNames) {
		return fmt.Sprintf("role(%d)", int(r))
	}
	return roleNames[r]
}

// ParseRole parses "read", "submit" or "manage".
func ParseRole(s string) (Role, error) {
	for i, n := range roleNames[1:] {
		if s == n {
			return Role(i + 1), nil
		}
	}
	return None, fmt.Errorf("role %q is unknown; use read, submit or manage", s)
}

// MarshalText writes the role's name.
func (r Role) MarshalText() ([]byte, error) {
	if r <= None || int(r) >= len(roleNames) {
		return nil, fmt.Errorf("role %d cannot be written", int(r))
	}
	return []byte(r.String()), nil
}

// UnmarshalText parses the role's name.
func (r *Role) UnmarshalText(b []byte) error {
	v, err := ParseRole(string(b))
	*r = v
	return err
}

// AllProjects in a grant gives its role in every project (the implicit
// principal of a server without tokens, and plain legacy tokens).
const AllProjects = "*"

// DefaultProject is the project of jobs created without one.
const DefaultProject = "default"

// Grant gives a role in one project.
type Grant struct {
	Project string `json:"project"`
	Role    Role   `json:"role"`
}

// Principal is who a request acts for.
type Principal struct {
	// Name names the principal in logs and the audit trail.
	Name string
	// Grants lists the principal's roles; the first project is the
	// default one for new jobs.
	Grants []Grant
}

// Everything is the implicit principal of a server without tokens: every
// role in every project.
func Everything() *Principal {
	return &Principal{Name: "local", Grants: []Grant{{AllProjects, Manage}}}
}

// Role returns the principal's role in project p.
func (pr *Principal) Role(p string) Role {
	if p == "" {
		p = DefaultProject
	}
	best := None
	for _, g := range pr.Grants {
		if (g.Project == p || g.Project == AllProjects) && g.Role > best {
			best = g.Role
		}
	}
	return best
}

// All reports whether the principal has a grant on every project.
func (pr *Principal) All() bool {
	for _, g := range pr.Grants {
		if g.Project == AllProjects {
			return true
		}
	}
	return false
}

// Default returns the project new jobs go to when none is chosen: the
// first granted one, or DefaultProject for a grant on every project.
func (pr *Principal) Default() string {
	if len(pr.Grants) == 0 || pr.Grants[0].Project == AllProjects {
		return DefaultProject
	}
	return pr.Grants[0].Project
}

// Record is one line of the token file.
type Record struct {
	// SHA256 is the hex SHA-256 digest of the token.
	SHA256    string     `json:"sha256"`
	Principal string     `json:"principal"`
	Grants    []Grant    `json:"grants"`
	Created   time.Time  `json:"created"`
	Expires   *time.Time `json:"expires,omitempty"`
}

// ID is the short public id of a record (the first 12 hex digits of its
// digest), used by `mottle token revoke` and in the audit trail. It says
// nothing useful about the token.
func (r *Record) ID() string {
	if len(r.SHA256) < 12 {
		return r.SHA256
	}
	return r.SHA256[:12]
}

// Who returns the principal of the record.
func (r *Record) Who() *Principal { return &Principal{Name: r.Principal, Grants: r.Grants} }

// Expired reports whether the record has expired at time now.
func (r *Record) Expired(now time.Time) bool { return r.Expires != nil && !now.Before(*r.Expires) }

// CheckName checks a principal or project name: 1–64 characters from
// [A-Za-z0-9._-].
func CheckName(what, s string) error {
	if len(s) == 0 || len(s) > 64 {
		return fmt.Errorf("%s %q must have 1 to 64 characters", what, s)
	}
	for _, c := range []byte(s) {
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' || c == '-' || c == '_' || c == '.') {
			return fmt.Errorf("%s %q may hold only letters, digits, '.', '_' and '-'", what, s)
		}
	}
	return nil
}

func (r *Record) check() error {
	if len(r.SHA256) != 64 {
		return fmt.Errorf("sha256 must be 64 hex digits, not %d characters", len(r.SHA256))
	}
	if _, err := hex.DecodeString(r.SHA256); err != nil || strings.ToLower(r.SHA256) != r.SHA256 {
		return errors.New("sha256 must be 64 lower-case hex digits")
	}
	if err := CheckName("principal", r.Principal); err != nil {
		return err
	}
	if len(r.Grants) == 0 {
		return errors.New("grants is empty; give at least one {\"project\":…,\"role\":…}")
	}
	for i, g := range r.Grants {
		if g.Project != AllProjects {
			if err := CheckName(fmt.Sprintf("grants[%d].project", i), g.Project); err != nil {
				return err
			}
		}
		if g.Role <= None || g.Role > Manage {
			return fmt.Errorf("grants[%d].role is missing; use read, submit or manage", i)
		}
	}
	if r.Created.IsZero() {
		return errors.New("created is missing")
	}
	return nil
}

// Digest returns the hex SHA-256 digest of a token.
func Digest(token string) string {
	s := sha256.Sum256([]byte(token))
	return hex.EncodeToString(s[:])
}

// NewToken returns a new token of 32 random bytes and its record.
func NewToken(principal string, grants []Grant, now time.Time, expires *time.Time) (string, *Record, error) {
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", nil, fmt.Errorf("new token: %w", err)
	}
	tok := "mt_" + base64.RawURLEncoding.EncodeToString(b[:])
	rec := &Record{SHA256: Digest(tok), Principal: principal, Grants: grants, Created: now.UTC(), Expires: expires}
	if err := rec.check(); err != nil {
		return "", nil, fmt.Errorf("new token: %w", err)
	}
	return tok, rec, nil
}

// MaxFileBytes bounds a token file.
const MaxFileBytes = 4 << 20

// Parse reads a token file. It reports every bad line with its number,
// and a digest given twice.
func Parse(r io.Reader) ([]*Record, error) {
	b, err := io.ReadAll(io.LimitReader(r, MaxFileBytes+1))
	if err != nil {
		return nil, fmt.Errorf("token file: %w", err)
	}
	if len(b) > MaxFileBytes {
		return nil, fmt.Errorf("token file: larger than %d bytes", MaxFileBytes)
	}
	var out []*Record
	var errs []error
	seen := map[string]int{}
	sc := bufio.NewScanner(bytes.NewReader(b))
	sc.Buffer(make([]byte, 0, 64<<10), MaxFileBytes)
	for n := 1; sc.Scan(); n++ {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		var rec Record
		dec := json.NewDecoder(strings.NewReader(line))
		dec.DisallowUnknownFields()
		err := dec.Decode(&rec)
		if err == nil && dec.More() {
			err = errors.New("text after the object")
		}
		if err == nil {
			err = rec.check()
		}
		if err == nil {
			if m, dup := seen[rec.SHA256]; dup {
				err = fmt.Errorf("the same token as line %d", m)
			}
		}
		if err != nil {
			errs = append(errs, fmt.Errorf("token file line %d: %w", n, err))
			continue
		}
		seen[rec.SHA256] = n
		out = append(out, &rec)
	}
	if err := sc.Err(); err != nil {
		errs = append(errs, fmt.Errorf("token file: %w", err))
	}
	if len(errs) > 0 {
		return nil, errors.Join(errs...)
	}
	return out, nil
}

// Format writes records as a token file that Parse reads back.
func Format(w io.Writer, recs []*Record) error {
	for _, r := range recs {
		b, err := json.Marshal(r)
		if err != nil {
			return fmt.Errorf("token file: %w", err)
		}
		if _, err := fmt.Fprintf(w, "%s\n", b); err != nil {
			return fmt.Errorf("token file: %w", err)
		}
	}
	return nil
}

// File is a token file read again whenever it changes on disk, so that a
// token added or revoked takes effect without a restart. Its methods are
// safe for concurrent use.
type File struct {
	path string

	mu   sync.Mutex
	mod  time.Time
	size int64
	recs map[string]*Record
	err  error
	gen  uint64
}

// OpenFile reads the token file at path.
func OpenFile(path string) (*File, error) {
	f := &File{path: path}
	if err := f.reload(); err != nil {
		return nil, err
	}
	return f, nil
}

// reload reads the file if it changed since the last read; f.mu held or
// not yet shared.
func (f *File) reload() error {
	st, err := os.Stat(f.path)
	if err != nil {
		return fmt.Errorf("token file: %w", err)
	}
	if f.recs != nil && st.ModTime().Equal(f.mod) && st.Size() == f.size {
		return nil
	}
	fh, err := os.Open(f.path)
	if err != nil {
		return fmt.Errorf("token file: %w", err)
	}
	defer fh.Close()
	recs, err := Parse(fh)
	if err != nil {
		return fmt.Errorf("%s: %w", f.path, err)
	}
	m := make(map[string]*Record, len(recs))
	for _, r := range recs {
		m[r.SHA256] = r
	}
	f.recs, f.mod, f.size = m, st.ModTime(), st.Size()
	f.gen++
	return nil
}

// Lookup returns the record of token, if the file holds it and it has not
// expired at now. A file that has become unreadable or invalid keeps the
// records last read, and Lookup returns the error with them.
func (f *File) Lookup(token string, now time.Time) (*Record, error) {
	f.mu.Lock()
	defer f.mu.Unlock()
	err := f.reload()
	r := f.recs[Digest(token)]
	if r == nil || r.Expired(now) {
		return nil, err
	}
	return r, err
}

// Generation counts the reads of the file that found it changed: it is
// 1 after OpenFile and grows by one each time the records are replaced.
// It does not read the file.
func (f *File) Generation() uint64 {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.gen
}

// Records returns the records last read, in no order.
func (f *File) Records() []*Record {
	f.mu.Lock()
	defer f.mu.Unlock()
	_ = f.reload()
	out := make([]*Record, 0, len(f.recs))
	for _, r := range f.recs {
		out = append(out, r)
	}
	return out
}
