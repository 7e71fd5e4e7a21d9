package access

import (
	"bytes"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"
)

func TestRoles(t *testing.T) {
	p := &Principal{Name: "lead", Grants: []Grant{{"lab-a", Manage}, {"lab-b", Read}}}
	for _, c := range []struct {
		project string
		want    Role
	}{{"lab-a", Manage}, {"lab-b", Read}, {"lab-c", None}, {"", None}} {
		if got := p.Role(c.project); got != c.want {
			t.Errorf("Role(%q) = %v, want %v", c.project, got, c.want)
		}
	}
	if p.Default() != "lab-a" || p.All() {
		t.Errorf("Default %q All %v, want lab-a false", p.Default(), p.All())
	}
	e := Everything()
	if e.Role("anything") != Manage || e.Role("") != Manage || !e.All() || e.Default() != DefaultProject {
		t.Errorf("Everything: %v %v %v %q", e.Role("anything"), e.Role(""), e.All(), e.Default())
	}
}

func TestNewTokenRoundTrip(t *testing.T) {
	now := time.Date(2026, 12, 2, 0, 0, 0, 0, time.UTC)
	exp := now.Add(time.Hour)
	tok, rec, err := NewToken("rig-3", []Grant{{"lab-a", Submit}}, now, &exp)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(tok, "mt_") || len(tok) != 3+43 || rec.SHA256 != Digest(tok) {
		t.Fatalf("token %d characters, digest %s", len(tok), rec.SHA256)
	}
	tok2, _, _ := NewToken("rig-3", []Grant{{"lab-a", Submit}}, now, nil)
	if tok2 == tok {
		t.Fatal("two tokens are equal")
	}
	var b bytes.Buffer
	if err := Format(&b, []*Record{rec}); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(b.String(), tok) {
		t.Fatal("the token file holds the token itself")
	}
	path := filepath.Join(t.TempDir(), "tokens")
	if err := os.WriteFile(path, b.Bytes(), 0o600); err != nil {
		t.Fatal(err)
	}
	f, err := OpenFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if r, _ := f.Lookup(tok, now); r == nil || r.Principal != "rig-3" {
		t.Fatalf("Lookup: %+v", r)
	}
	if r, _ := f.Lookup(tok, exp); r != nil {
		t.Fatal("an expired token is accepted")
	}
	if r, _ := f.Lookup(tok2, now); r != nil {
		t.Fatal("an unknown token is accepted")
	}
	// Revocation: the file is rewritten without the record.
	if err := os.WriteFile(path, []byte("# none left\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if r, _ := f.Lookup(tok, now); r != nil {
		t.Fatal("a revoked token is still accepted")
	}
}

func TestParseErrors(t *testing.T) {
	good := `{"sha256":"` + strings.Repeat("ab", 32) + `","principal":"p","grants":[{"project":"x","role":"read"}],"created":"2026-12-02T00:00:00Z"}`
	for _, c := range []struct{ name, in, want string }{
		{"not json", "hello", "line 1"},
		{"short digest", strings.Replace(good, strings.Repeat("ab", 32), "abcd", 1), "64 hex"},
		{"upper-case digest", strings.Replace(good, strings.Repeat("ab", 32), strings.Repeat("AB", 32), 1), "lower-case"},
		{"no grants", strings.Replace(good, `[{"project":"x","role":"read"}]`, `[]`, 1), "grants is empty"},
		{"bad role", strings.Replace(good, `"read"`, `"admin"`, 1), "read, submit or manage"},
		{"bad project", strings.Replace(good, `"x"`, `"a b"`, 1), "project"},
		{"unknown field", strings.Replace(good, `"principal"`, `"token":"x","principal"`, 1), "unknown field"},
		{"duplicate", good + "\n\n" + good, "line 3: the same token as line 1"},
		{"trailing", good + " {}", "text after"},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Parse(strings.NewReader(c.in))
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want one with %q", err, c.want)
			}
		})
	}
	recs, err := Parse(strings.NewReader("# comment\n\n" + good + "\n"))
	if err != nil || len(recs) != 1 || recs[0].Grants[0].Role != Read {
		t.Fatalf("good file: %v %+v", err, recs)
	}
}

// FuzzParse: Parse never panics; what it accepts passes the record checks
// and survives Format and Parse unchanged.
func FuzzParse(f *testing.F) {
	f.Add([]byte(`{"sha256":"` + strings.Repeat("0f", 32) + `","principal":"p","grants":[{"project":"x","role":"manage"}],"created":"2026-12-02T00:00:00Z"}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		recs, err := Parse(bytes.NewReader(b))
		if err != nil {
			if recs != nil {
				t.Fatal("records returned with an error")
			}
			return
		}
		for _, r := range recs {
			if err := r.check(); err != nil {
				t.Fatalf("accepted a bad record: %v", err)
			}
		}
		var out bytes.Buffer
		if err := Format(&out, recs); err != nil {
			t.Fatal(err)
		}
		again, err := Parse(&out)
		if err != nil {
			t.Fatalf("Format wrote what Parse rejects: %v\n%s", err, out.Bytes())
		}
		if len(again) != len(recs) {
			t.Fatalf("%d records after the round trip, want %d", len(again), len(recs))
		}
		for i := range recs {
			a, b := *recs[i], *again[i]
			if !a.Created.Equal(b.Created) || (a.Expires == nil) != (b.Expires == nil) || a.Expires != nil && !a.Expires.Equal(*b.Expires) {
				t.Fatalf("record %d times changed", i)
			}
			a.Created, b.Created, a.Expires, b.Expires = time.Time{}, time.Time{}, nil, nil
			if !reflect.DeepEqual(a, b) {
				t.Fatalf("record %d changed: %+v, then %+v", i, a, b)
			}
		}
	})
}
