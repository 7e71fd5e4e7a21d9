package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service/access"
)

// TestTokenCommand adds, lists and revokes tokens; the file keeps only
// digests, and the token is printed once, to stdout.
func TestTokenCommand(t *testing.T) {
	file := filepath.Join(t.TempDir(), "tokens.jsonl")
	e, out, errb := testEnv()
	if code := run(context.Background(), e, []string{"token", "add", "--file", file, "--principal", "rig-3", "--grant", "lab-a=submit,lab-b=read", "--expires", "24h"}); code != 0 {
		t.Fatalf("token add: %d %s", code, errb)
	}
	tok := strings.TrimSpace(out.String())
	b, _ := os.ReadFile(file)
	if len(tok) < 40 || strings.Contains(string(b), tok) || strings.Contains(errb.String(), tok) {
		t.Fatalf("token %q; the file or stderr holds it: %s %s", tok, b, errb)
	}
	f, err := access.OpenFile(file)
	if err != nil {
		t.Fatal(err)
	}
	rec, _ := f.Lookup(tok, time.Now())
	if rec == nil || rec.Principal != "rig-3" || rec.Who().Role("lab-a") != access.Submit || rec.Who().Role("lab-b") != access.Read || rec.Expires == nil {
		t.Fatalf("record %+v", rec)
	}
	e, out, _ = testEnv()
	if code := run(context.Background(), e, []string{"token", "list", "--file", file}); code != 0 || !strings.Contains(out.String(), rec.ID()) || !strings.Contains(out.String(), "lab-a=submit,lab-b=read") || strings.Contains(out.String(), tok) {
		t.Fatalf("token list: %d %s", code, out)
	}
	e, _, errb = testEnv()
	if code := run(context.Background(), e, []string{"token", "revoke", "nosuchid", "--file", file}); code != 1 {
		t.Errorf("revoke of an unknown id: %d", code)
	}
	if code := run(context.Background(), e, []string{"token", "revoke", rec.ID(), "--file", file}); code != 0 {
		t.Fatalf("token revoke: %d %s", code, errb)
	}
	if r, _ := f.Lookup(tok, time.Now()); r != nil {
		t.Error("a revoked token is still accepted by the open file")
	}
	e, _, errb = testEnv()
	if code := run(context.Background(), e, []string{"token", "add", "--file", file, "--principal", "x", "--grant", "lab-a=root"}); code != 2 || !strings.Contains(errb.String(), "read, submit or manage") {
		t.Errorf("bad role: %d %s", code, errb)
	}
}

// TestServeRefusesOpen: without tokens, a non-loopback address is
// refused unless --insecure-open is given.
func TestServeRefusesOpen(t *testing.T) {
	e, _, errb := testEnv()
	code := run(context.Background(), e, []string{"serve", "--addr", "0.0.0.0:0", "--data", t.TempDir(), "--workers", "1", "--no-ui"})
	if code != 2 || !strings.Contains(errb.String(), "--insecure-open") {
		t.Errorf("serve on 0.0.0.0 without tokens: %d %s", code, errb)
	}
}
