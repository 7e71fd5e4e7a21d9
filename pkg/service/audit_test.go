package service_test

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// auditWant is an audit entry a test expects; project is empty for a
// token entry, whose projects are those of its grants.
type auditWant struct {
	action, resource, id, series, principal, project, request string
	projects                                                  []string
}

func (w auditWant) String() string {
	return fmt.Sprintf("%s %s %s (series %q) by %s in %q%v, request %q", w.action, w.resource, w.id, w.series, w.principal, w.project, w.projects, w.request)
}

// expect adds an entry of the request just sent.
func (l *lab) expect(action, resource, id, series, who, project string) {
	l.want = append(l.want, auditWant{action: action, resource: resource, id: id, series: series, principal: who, project: project, request: l.lastReq})
}

// expectTokens adds the token-add entries of recs, in the order of
// their public ids (the order the server records a batch of changes in).
func (l *lab) expectTokens(recs ...*access.Record) { l.expectTokenChange(jobs.AuditTokenAdd, recs...) }

func (l *lab) expectTokenChange(action string, recs ...*access.Record) {
	recs = slices.Clone(recs)
	slices.SortFunc(recs, func(a, b *access.Record) int { return strings.Compare(a.ID(), b.ID()) })
	for _, r := range recs {
		var projs []string
		for _, g := range r.Grants {
			projs = append(projs, g.Project)
		}
		l.want = append(l.want, auditWant{action: action, resource: jobs.AuditToken, id: r.ID(), principal: "token-file", projects: projs})
	}
}

// projectOf is the project a create by who lands in.
func (l *lab) projectOf(who, project string) string {
	if project != "" {
		return project
	}
	for _, p := range labPrincipals {
		if p.name == who {
			return p.project
		}
	}
	return access.DefaultProject
}

// expectChange adds the entry of a change the matrix made with a 2xx
// answer; a change the test cannot name fails.
func (l *lab) expectChange(t *testing.T, name, method, pattern string, f fixture, who, proj string) {
	t.Helper()
	switch {
	case method == "DELETE" && pattern == "/v1/analyses/{id}":
		l.expect(jobs.AuditDelete, jobs.AuditAnalysis, f.analysis, "", who, proj)
	case method == "DELETE" && pattern == "/v1/series/{id}":
		l.expect(jobs.AuditDelete, jobs.AuditSeries, f.series, "", who, proj)
	case method == "PATCH" && pattern == "/v1/analyses/{id}":
		l.expect(jobs.AuditRename, jobs.AuditAnalysis, f.analysis, "", who, proj)
	case method == "PATCH" && pattern == "/v1/series/{id}":
		l.expect(jobs.AuditRename, jobs.AuditSeries, f.series, "", who, proj)
	case method == "POST" && pattern == "/v1/analyses/{id}/cancel":
		l.expect(jobs.AuditCancel, jobs.AuditAnalysis, f.analysis, "", who, proj)
	case method == "POST" && (pattern == "/v1/stream-tickets" || pattern == "/v1/series/{id}/live"):
		// Nothing stored: a ticket, a live session in memory.
	default:
		t.Errorf("%s: succeeded, and the test does not know what audit entry it should leave", name)
	}
}

// auditLines reads /v1/audit.jsonl as who.
func (l *lab) auditLines(t *testing.T, who string) []byte {
	t.Helper()
	st, b := l.call(t, who, "GET", "/v1/audit.jsonl", nil, "", nil)
	if st != 200 {
		t.Fatalf("%s reads /v1/audit.jsonl: %d %s", who, st, b)
	}
	return b
}

func parseLines(t *testing.T, b []byte) []jobs.AuditEntry {
	t.Helper()
	var out []jobs.AuditEntry
	sc := bufio.NewScanner(bytes.NewReader(b))
	sc.Buffer(nil, 1<<20)
	for sc.Scan() {
		var e jobs.AuditEntry
		dec := json.NewDecoder(bytes.NewReader(sc.Bytes()))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&e); err != nil {
			t.Fatalf("audit line %q: %v", sc.Text(), err)
		}
		out = append(out, e)
	}
	return out
}

// auditPages reads /v1/audit as who, limit entries a page, following
// next.
func (l *lab) auditPages(t *testing.T, who string, limit int) []jobs.AuditEntry {
	t.Helper()
	var out []jobs.AuditEntry
	path := fmt.Sprintf("/v1/audit?limit=%d", limit)
	for pages := 0; path != ""; pages++ {
		if pages > 1000 {
			t.Fatal("the audit pages do not end")
		}
		st, b := l.call(t, who, "GET", path, nil, "", nil)
		if st != 200 {
			t.Fatalf("%s reads %s: %d %s", who, path, st, b)
		}
		doc := decodeJSON[struct {
			Entries []jobs.AuditEntry
			Next    string
		}](t, b)
		if len(doc.Entries) > limit {
			t.Fatalf("%s: %d entries, more than limit=%d", path, len(doc.Entries), limit)
		}
		out = append(out, doc.Entries...)
		path = doc.Next
	}
	return out
}

// compareAudit checks entries against the wanted ones in order.
func compareAudit(t *testing.T, who string, got []jobs.AuditEntry, want []auditWant) {
	t.Helper()
	for i := 0; i < max(len(got), len(want)); i++ {
		switch {
		case i >= len(got):
			t.Errorf("%s: audit entry %d missing: want %v", who, i, want[i])
			continue
		case i >= len(want):
			t.Errorf("%s: audit entry %d %+v not expected", who, i, got[i])
			continue
		}
		g, w := got[i], want[i]
		gw := auditWant{action: g.Action, resource: g.Resource, id: g.ID, series: g.Series, principal: g.Principal, project: g.Project, request: g.RequestID, projects: g.Projects}
		if gw.String() != w.String() {
			t.Errorf("%s: audit entry %d is\n\t%v\nwant\t%v", who, i, gw, w)
		}
		if i > 0 && (g.Seq <= got[i-1].Seq || g.Time.Before(got[i-1].Time)) {
			t.Errorf("%s: audit entry %d (seq %d, %v) does not come after seq %d (%v)", who, i, g.Seq, g.Time, got[i-1].Seq, got[i-1].Time)
		}
		if g.Time.IsZero() || time.Since(g.Time) > time.Hour {
			t.Errorf("%s: audit entry %d has the time %v", who, i, g.Time)
		}
	}
}

// visibleTo filters want to the entries of project proj.
func visibleTo(want []auditWant, proj string) []auditWant {
	var out []auditWant
	for _, w := range want {
		if w.project == proj || slices.Contains(w.projects, proj) {
			out = append(out, w)
		}
	}
	return out
}

// checkAudit kills the lab's server process, revokes the display's token
// while it is down, starts it again, adds a token with manage in every
// project, and checks that the trail holds the wanted entries in order:
// as seen by that token (everything), by each project's lead (their
// project only, as JSON lines and in pages), and that the entries read
// before the kill are unchanged after it.
func (l *lab) checkAudit(t *testing.T) {
	t.Helper()
	before := l.auditLines(t, "lead")
	if len(parseLines(t, before)) == 0 {
		t.Fatal("no audit entries before the kill")
	}
	l.kill(t)
	var display *access.Record
	l.recs = slices.DeleteFunc(l.recs, func(r *access.Record) bool {
		if r.Principal == "display" {
			display = r
			return true
		}
		return false
	})
	l.write(t)
	l.expectTokenChange(jobs.AuditTokenRevoke, display)
	l.start(t)
	// A request: the server has started (and recorded the revocation)
	// before the token file changes again.
	if st, b := l.call(t, "lead", "GET", "/v1/series", nil, "", nil); st != 200 {
		t.Fatalf("after the restart: %d %s", st, b)
	}
	l.expectTokens(l.addToken(t, "auditor", access.Grant{Project: access.AllProjects, Role: access.Manage}))
	l.write(t)

	all := l.auditLines(t, "auditor")
	compareAudit(t, "auditor", parseLines(t, all), l.want)
	for _, who := range []struct{ name, project string }{{"lead", "lab-a"}, {"lead-b", "lab-b"}} {
		want := visibleTo(l.want, who.project)
		lines := l.auditLines(t, who.name)
		compareAudit(t, who.name, parseLines(t, lines), want)
		compareAudit(t, who.name+" in pages", l.auditPages(t, who.name, 7), want)
		if who.name == "lead" && !bytes.HasPrefix(lines, before) {
			t.Errorf("the audit entries read before the kill changed:\nbefore\n%s\nafter\n%s", before, lines)
		}
	}
	for name, tok := range l.tokens {
		if bytes.Contains(all, []byte(tok)) || bytes.Contains(all, []byte(access.Digest(tok))) {
			t.Errorf("the audit trail holds %s's token or its whole digest", name)
		}
	}
	if st, b := l.call(t, "rig", "GET", "/v1/audit", nil, "", nil); st != 403 {
		t.Errorf("rig (submit) reads the audit trail: %d %s, want 403", st, b)
	}
}

// brokenAudit is an audit trail whose store is down.
type brokenAudit struct{}

func (brokenAudit) Append(context.Context, *jobs.AuditEntry) error {
	return errors.New("audit store unavailable")
}

func (brokenAudit) AuditEntries(context.Context, jobs.AuditFilter) ([]*jobs.AuditEntry, error) {
	return nil, errors.New("audit store unavailable")
}

// TestAuditStoreDown: when an entry cannot be stored the change still
// happens, the whole entry goes to the log at level ERROR, and
// /metrics counts it; reading the trail answers an error document.
func TestAuditStoreDown(t *testing.T) {
	log := &syncBuffer{}
	ts := newServer(t, func(c *service.Config) {
		c.Backend.Audit = brokenAudit{}
		c.Logger = slog.New(slog.NewJSONHandler(log, nil))
	})
	ref, def := pair(t, 32, 32, 1, 0, 21)
	ct, body := multipartBody(t, analysisParts(ref, def, `{"subset": 15}`)...)
	resp, b := ts.do(t, "POST", "/v1/analyses", ct, body)
	if resp.StatusCode != 202 {
		t.Fatalf("create with the audit store down: %d %s", resp.StatusCode, b)
	}
	id := decodeJSON[jobDoc](t, b).ID
	var line map[string]any
	for _, l := range strings.Split(log.String(), "\n") {
		if strings.Contains(l, "audit entry not stored") {
			json.Unmarshal([]byte(l), &line)
		}
	}
	if line["level"] != "ERROR" || line["id"] != id || line["action"] != "create" || line["principal"] != "local" || line["request_id"] == "" {
		t.Errorf("log line of the lost entry: %v", line)
	}
	_, b = ts.do(t, "GET", "/metrics", "", nil)
	if !strings.Contains(string(b), "mottle_audit_failures_total 1\n") {
		t.Errorf("metrics do not count the lost entry")
	}
	if resp, b := ts.do(t, "GET", "/v1/audit", "", nil); resp.StatusCode < 500 || !strings.Contains(string(b), `"type"`) {
		t.Errorf("reading the trail with its store down: %d %s", resp.StatusCode, b)
	}
}

// TestAuditStoreDownTokens: with the audit store down, tokens still work
// and a revocation still takes effect at once; the failure to record the
// token changes is logged.
func TestAuditStoreDownTokens(t *testing.T) {
	l := newLab(t, func(c *service.Config) { c.Backend.Audit = brokenAudit{} })
	if st, b := l.call(t, "display", "GET", "/v1/series", nil, "", nil); st != 200 {
		t.Fatalf("with the audit store down: %d %s", st, b)
	}
	l.recs = l.recs[1:] // revoke the display
	l.write(t)
	if st, _ := l.call(t, "display", "GET", "/v1/series", nil, "", nil); st != 401 {
		t.Errorf("revoked with the audit store down: %d, want 401", st)
	}
	if st, _ := l.call(t, "rig", "GET", "/v1/series", nil, "", nil); st != 200 {
		t.Errorf("another token with the audit store down: %d, want 200", st)
	}
	if !strings.Contains(l.log(), "token changes not recorded") {
		t.Error("the log does not say that the token changes were not recorded")
	}
}
