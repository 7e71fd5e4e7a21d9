package service_test

import (
	"strconv"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/access"
)

// TestPrincipalRate: a principal over its request rate is answered 429
// with Retry-After, and another principal is not slowed by it.
func TestPrincipalRate(t *testing.T) {
	// 0.01 requests a second: the bucket does not refill within the test.
	l := newLab(t, func(c *service.Config) { c.RateLimit, c.RateBurst = 0.01, 3 })
	for i := 0; i < 3; i++ {
		if st, b := l.call(t, "rig", "GET", "/v1/series", nil, "", nil); st != 200 {
			t.Fatalf("request %d within the burst: %d %s", i+1, st, b)
		}
	}
	st, b := l.call(t, "rig", "GET", "/v1/series", nil, "", nil)
	if st != 429 || decodeJSON[problemDoc](t, b).Type != "urn:mottle:problem:rate-limited" {
		t.Fatalf("request past the burst: %d %s, want 429 rate-limited", st, b)
	}
	// One request refills in 1/0.01 s.
	if ra, err := strconv.Atoi(l.lastHdr.Get("Retry-After")); err != nil || ra < 90 || ra > 100 {
		t.Errorf("Retry-After %q, want about 100 s", l.lastHdr.Get("Retry-After"))
	}
	if st, b := l.call(t, "display", "GET", "/v1/series", nil, "", nil); st != 200 {
		t.Errorf("another principal: %d %s, want 200", st, b)
	}
}

// TestPrincipalQueued: a principal with MaxQueuedPerPrincipal jobs
// waiting is answered 429 with Retry-After for the next, while another
// principal still submits.
func TestPrincipalQueued(t *testing.T) {
	h := newHolder()
	l := newLab(t, func(c *service.Config) { c.MaxQueuedPerPrincipal, c.Workers, c.BeforeCompute = 1, 1, h.hook })
	t.Cleanup(h.release)
	ref, def := pair(t, 40, 40, 1, 0, 3)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	submit := func(who string) (int, []byte) { return l.call(t, who, "POST", "/v1/analyses", nil, ct, body) }
	if st, b := submit("rig"); st != 202 {
		t.Fatalf("first: %d %s", st, b)
	}
	h.next(t) // running (held): no longer waiting
	if st, b := submit("rig"); st != 202 {
		t.Fatalf("second (the one waiting): %d %s", st, b)
	}
	st, b := submit("rig")
	if st != 429 || decodeJSON[problemDoc](t, b).Type != "urn:mottle:problem:principal-queue-full" {
		t.Fatalf("third: %d %s, want 429 principal-queue-full", st, b)
	}
	if ra, err := strconv.ParseFloat(l.lastHdr.Get("Retry-After"), 64); err != nil || ra < 1 {
		t.Errorf("Retry-After %q, want a whole number of seconds ≥ 1", l.lastHdr.Get("Retry-After"))
	}
	if st, b := submit("lead"); st != 202 {
		t.Errorf("another principal: %d %s, want 202", st, b)
	}
}

// TestPrincipalDoc: GET /v1/principal names the caller, its grants and
// default project (call checks that the answer holds no token).
func TestPrincipalDoc(t *testing.T) {
	l := newLab(t, nil)
	st, b := l.call(t, "rig", "GET", "/v1/principal", nil, "", nil)
	doc := decodeJSON[struct {
		Principal      string
		Grants         []struct{ Project, Role string }
		DefaultProject string `json:"default_project"`
		TokensRequired bool   `json:"tokens_required"`
	}](t, b)
	if st != 200 || doc.Principal != "rig" || len(doc.Grants) != 1 || doc.Grants[0].Project != "lab-a" || doc.Grants[0].Role != "submit" ||
		doc.DefaultProject != "lab-a" || !doc.TokensRequired {
		t.Errorf("rig's principal: %d %s", st, b)
	}
	open := newServer(t, nil)
	_, b = open.do(t, "GET", "/v1/principal", "", nil)
	if !strings.Contains(string(b), `"principal": "local"`) || !strings.Contains(string(b), `"project": "*"`) || !strings.Contains(string(b), `"tokens_required": false`) {
		t.Errorf("without tokens: %s", b)
	}
}

// TestReplayAfterGrantChange: a repeat under an Idempotency-Key is
// answered from what the first request created only while the token may
// still create in its project: 403 once the token can only read there,
// 404 (as an unknown id) once it has no role there.
func TestReplayAfterGrantChange(t *testing.T) {
	l := newLab(t, nil)
	ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", encodePNG(t, speckle(40, 40, 0, 0, 5))})
	key := map[string]string{"Idempotency-Key": "rig-run-7"}
	if st, b := l.call(t, "rig", "POST", "/v1/series", key, ct, body); st != 201 {
		t.Fatalf("first: %d %s", st, b)
	}
	if st, b := l.call(t, "rig", "POST", "/v1/series", key, ct, body); st != 201 {
		t.Fatalf("repeat: %d %s", st, b)
	}
	rig := l.recs[1]
	if rig.Principal != "rig" {
		t.Fatalf("record 1 is %s", rig.Principal)
	}
	for _, c := range []struct {
		grant access.Grant
		want  int
	}{{access.Grant{Project: "lab-a", Role: access.Read}, 403}, {access.Grant{Project: "lab-b", Role: access.Submit}, 404}} {
		rig.Grants = []access.Grant{c.grant}
		l.write(t)
		if st, b := l.call(t, "rig", "POST", "/v1/series", key, ct, body); st != c.want {
			t.Errorf("repeat with the grant %v: %d %s, want %d", c.grant, st, b, c.want)
		}
	}
}
