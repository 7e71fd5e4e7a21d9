package service

import (
	"net/http"
	"strings"
	"testing"
)

// sfString quotes s as a Structured Field string (RFC 8941 section 3.3.3).
func sfString(s string) string {
	return `"` + strings.NewReplacer(`\`, `\\`, `"`, `\"`).Replace(s) + `"`
}

func TestParseIdempotencyKey(t *testing.T) {
	for _, c := range []struct {
		in, want string
		ok       bool // well formed
	}{
		{"8e03978e-40d5-43e8-bc93-6894a57f9324", "8e03978e-40d5-43e8-bc93-6894a57f9324", true},   // the draft's example (a UUID)
		{`"8e03978e-40d5-43e8-bc93-6894a57f9324"`, "8e03978e-40d5-43e8-bc93-6894a57f9324", true}, // sf-string form
		{`  rig-4/frame-0012 `, "rig-4/frame-0012", true},
		{`"with space"`, "with space", true},
		{`"q\"b\\s"`, `q"b\s`, true},
		{strings.Repeat("k", 255), strings.Repeat("k", 255), true},
		{"", "", false},
		{`""`, "", false},
		{"a b", "", false},
		{"caf\u00e9", "", false},
		{"tab\tkey", "", false},
		{`"open`, "", false},
		{`"x"y`, "", false},
		{`"x";p=1`, "", false},
		{`"bad\n"`, "", false},
		{"\"nul\x00\"", "", false},
		{strings.Repeat("k", 256), "", false},
		{`"` + strings.Repeat("k", 256) + `"`, "", false},
	} {
		h := http.Header{}
		h.Set("Idempotency-Key", c.in)
		got, present, err := parseIdempotencyKey(h)
		if !present || (err == nil) != c.ok || got != c.want {
			t.Errorf("%q: %q, present %v, %v; want %q, well formed %v", c.in, got, present, err, c.want, c.ok)
		}
	}
	if _, present, err := parseIdempotencyKey(http.Header{}); present || err != nil {
		t.Errorf("no header: present %v, %v", present, err)
	}
	h := http.Header{"Idempotency-Key": {"a", "b"}}
	if _, _, err := parseIdempotencyKey(h); err == nil {
		t.Error("two header lines accepted")
	}
}

// FuzzIdempotencyKey: any header value gives a key of 1 to 255 printable
// ASCII characters or an error, never a panic; a key quoted as a
// Structured Field string parses back to itself.
func FuzzIdempotencyKey(f *testing.F) {
	for _, s := range []string{"abc", `"a\"b"`, `"\\"`, `"`, `\`, "", " x ", strings.Repeat("z", 300), "\xff\xfe", `"a"b"`} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, v string) {
		key, present, err := parseIdempotencyKey(http.Header{"Idempotency-Key": {v}})
		if !present {
			t.Fatal("header not seen")
		}
		if err != nil {
			if key != "" {
				t.Fatalf("%q: error %v with key %q", v, err, key)
			}
			return
		}
		if len(key) < 1 || len(key) > maxKeyLen {
			t.Fatalf("%q: key of %d characters", v, len(key))
		}
		for i := 0; i < len(key); i++ {
			if key[i] < 0x20 || key[i] > 0x7e {
				t.Fatalf("%q: key holds 0x%02x", v, key[i])
			}
		}
		back, _, err := parseIdempotencyKey(http.Header{"Idempotency-Key": {sfString(key)}})
		if err != nil || back != key {
			t.Fatalf("%q: key %q quoted as %s parses to %q, %v", v, key, sfString(key), back, err)
		}
	})
}
