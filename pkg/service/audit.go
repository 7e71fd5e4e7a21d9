package service

import (
	"context"
	"encoding/json"
	"fmt"
	"maps"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// This file keeps the audit trail: the handlers that change something
// call record (create, cancel, delete, rename), auditTokens turns a
// change of the token file into entries, and GET /v1/audit and
// /v1/audit.jsonl read the trail for principals with the role manage.

// auditTimeout bounds the storing of one entry. It is not tied to the
// request: an entry of a change that happened is stored even when the
// client has gone.
const auditTimeout = 30 * time.Second

// record appends an entry for a change made by the request of ctx. A
// failure to store it is logged with the whole entry at level ERROR (the
// change itself has happened and is not undone).
func (s *Server) record(ctx context.Context, e jobs.AuditEntry) {
	e.Time = time.Now().UTC()
	if e.Principal == "" {
		e.Principal = caller(ctx).Name
	}
	if e.RequestID == "" {
		e.RequestID = requestID(ctx)
	}
	actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), auditTimeout)
	defer cancel()
	if err := s.audit.Append(actx, &e); err != nil {
		s.metrics.auditFailed()
		s.log.Error("audit entry not stored", "error", err.Error(), "action", e.Action, "principal", e.Principal,
			"project", e.Project, "resource", e.Resource, "id", e.ID, "series", e.Series, "request_id", e.RequestID, "detail", e.Detail)
	}
}

// recordJob records action on job j (an analysis or a frame).
func (s *Server) recordJob(ctx context.Context, action string, j *jobs.Job, detail string) {
	e := jobs.AuditEntry{Action: action, Project: projectOf(j.Project), Resource: jobs.AuditAnalysis, ID: j.ID, Detail: detail}
	if j.Kind == jobs.Frame {
		e.Resource, e.Series = jobs.AuditFrame, j.Series
		if detail == "" {
			e.Detail = "frame " + strconv.Itoa(j.FrameIndex)
		}
	}
	s.record(ctx, e)
}

// recordSeries records action on series sr.
func (s *Server) recordSeries(ctx context.Context, action string, sr *jobs.Series, detail string) {
	s.record(ctx, jobs.AuditEntry{Action: action, Project: projectOf(sr.Project), Resource: jobs.AuditSeries, ID: sr.ID, Detail: detail})
}

// tokenAudit remembers the generation of the token file last compared
// with the trail, and when to try again after a failure.
type tokenAudit struct {
	gen   atomic.Uint64
	mu    sync.Mutex // held while comparing
	retry time.Time  // no new attempt before (mu held)
}

// tokenAuditRetry is the pause after a failed comparison: a trail that
// cannot be read must not slow every request.
const tokenAuditRetry = 10 * time.Second

// tokenFilePrincipal is the principal of token entries: the token file is
// edited outside the service (mottle token add|revoke), which sees only
// that it changed.
const tokenFilePrincipal = "token-file"

// auditTokens records the changes of the token file since the trail last
// recorded it: the known tokens are those the trail's token entries leave
// (so changes made while the service was stopped are recorded at the
// next start), compared with the file's records by their public id. Each
// entry carries a Dedupe key made of the last token entry seen and the
// change, so that two API nodes on one NATS backend noticing the same
// change store it once.
func (s *Server) auditTokens(ctx context.Context) {
	f := s.cfg.TokenFile
	if f == nil {
		return
	}
	g := f.Generation()
	ta := &s.tokAudit
	if g == ta.gen.Load() || !ta.mu.TryLock() {
		// Nothing new, or another request is recording it: this request
		// goes on (its token was checked against the file as it is now).
		return
	}
	defer ta.mu.Unlock()
	if g == ta.gen.Load() || time.Now().Before(ta.retry) {
		return
	}
	actx, cancel := context.WithTimeout(context.WithoutCancel(ctx), auditTimeout)
	defer cancel()
	trail, err := s.audit.AuditEntries(actx, jobs.AuditFilter{Resource: jobs.AuditToken})
	if err != nil {
		ta.retry = time.Now().Add(tokenAuditRetry)
		s.log.Error("audit trail: token changes not recorded (tried again in 10 s, at a request)", "error", err.Error())
		return
	}
	known := map[string]string{}
	var last uint64
	for _, e := range trail {
		last = e.Seq
		if e.Action == jobs.AuditTokenRevoke {
			delete(known, e.ID)
		} else {
			known[e.ID] = e.Detail
		}
	}
	cur := map[string]*access.Record{}
	for _, r := range f.Records() {
		cur[r.ID()] = r
	}
	var entries []jobs.AuditEntry
	for _, id := range slices.Sorted(maps.Keys(cur)) {
		r := cur[id]
		d := tokenDetail(r)
		action := jobs.AuditTokenAdd
		if old, ok := known[id]; ok {
			if old == d {
				continue
			}
			action = jobs.AuditTokenChange
		}
		entries = append(entries, jobs.AuditEntry{Action: action, ID: id, Projects: grantProjects(r.Grants), Detail: d})
	}
	for _, id := range slices.Sorted(maps.Keys(known)) {
		if cur[id] == nil {
			entries = append(entries, jobs.AuditEntry{Action: jobs.AuditTokenRevoke, ID: id, Projects: detailProjects(known[id]), Detail: known[id]})
		}
	}
	for _, e := range entries {
		e.Time = time.Now().UTC()
		e.Principal, e.Resource = tokenFilePrincipal, jobs.AuditToken
		e.Dedupe = fmt.Sprintf("token %d %s %s %s", last, e.Action, e.ID, e.Detail)
		if err := s.audit.Append(actx, &e); err != nil {
			ta.retry = time.Now().Add(tokenAuditRetry)
			s.metrics.auditFailed()
			s.log.Error("audit trail: token change not recorded (tried again in 10 s, at a request)", "error", err.Error(), "action", e.Action, "id", e.ID)
			return
		}
	}
	ta.gen.Store(g)
}

// tokenDetail describes a token record for the trail (never the token
// nor its digest beyond the public id): principal, grants, expiry.
func tokenDetail(r *access.Record) string {
	var b strings.Builder
	b.WriteString("principal " + r.Principal + "; grants")
	for _, g := range r.Grants {
		b.WriteString(" " + g.Project + ":" + g.Role.String())
	}
	if r.Expires != nil {
		b.WriteString("; expires " + r.Expires.UTC().Format(time.RFC3339))
	}
	return b.String()
}

func grantProjects(gs []access.Grant) []string {
	var out []string
	for _, g := range gs {
		if !slices.Contains(out, g.Project) {
			out = append(out, g.Project)
		}
	}
	return out
}

// detailProjects reads the projects back from a tokenDetail.
func detailProjects(d string) []string {
	_, gs, _ := strings.Cut(d, "; grants ")
	gs, _, _ = strings.Cut(gs, ";")
	var out []string
	for _, g := range strings.Fields(gs) {
		if p, _, ok := strings.Cut(g, ":"); ok && !slices.Contains(out, p) {
			out = append(out, p)
		}
	}
	return out
}

// auditVisible reports whether p may read entry e: the role manage in
// its project, or for a token entry in one of the projects of its
// grants; want, if not empty, is the one project asked for.
func auditVisible(p *access.Principal, e *jobs.AuditEntry, want string) bool {
	projs := e.Projects
	if len(projs) == 0 {
		projs = []string{projectOf(e.Project)}
	}
	for _, pr := range projs {
		if (want == "" || want == pr) && p.Role(pr) >= access.Manage {
			return true
		}
	}
	return false
}

// auditQuery is a parsed query of the audit routes.
type auditQuery struct {
	project string
	since   time.Time
	after   uint64
	limit   int
}

const (
	auditDefaultLimit = 100
	auditMaxLimit     = 1000
)

func parseAuditQuery(r *http.Request, defLimit int) (auditQuery, *Problem) {
	q := auditQuery{project: requestedProject(r), limit: defLimit}
	v := r.URL.Query()
	bad := func(name, detail, hint string) (auditQuery, *Problem) {
		return q, problem(http.StatusBadRequest, "bad-query", "Invalid query", name+" "+strconv.Quote(v.Get(name))+" "+detail,
			FieldProblem{name, hint})
	}
	if s := v.Get("since"); s != "" {
		t, err := time.Parse(time.RFC3339Nano, s)
		if err != nil {
			return bad("since", "is not an RFC 3339 time", "give a time such as 2026-12-02T08:00:00Z")
		}
		q.since = t
	}
	if s := v.Get("after"); s != "" {
		n, err := strconv.ParseUint(s, 10, 64)
		if err != nil {
			return bad("after", "is not a whole number ≥ 0", "give the seq of the last entry of the previous page (or follow next)")
		}
		q.after = n
	}
	if s := v.Get("limit"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil || n < 1 || n > auditMaxLimit {
			return bad("limit", "is not a whole number from 1 to "+strconv.Itoa(auditMaxLimit), "give 1 to "+strconv.Itoa(auditMaxLimit))
		}
		q.limit = n
	}
	return q, nil
}

// manager answers 403 unless the caller has the role manage in some
// project (in the project asked for, if any, as authenticate checks).
func manager(w http.ResponseWriter, r *http.Request) bool {
	p := caller(r.Context())
	for _, g := range p.Grants {
		if g.Role >= access.Manage {
			return true
		}
	}
	forbid(w, r, p, access.Manage, "some project")
	return false
}

// auditPage reads up to q.limit entries visible to the caller after
// q.after (0: no limit); more is true when the page is full, so there may
// be more.
func (s *Server) auditPage(ctx context.Context, p *access.Principal, q auditQuery, each func(*jobs.AuditEntry) error) (last uint64, more bool, err error) {
	last = q.after
	n := 0
	for {
		batch, err := s.audit.AuditEntries(ctx, jobs.AuditFilter{After: last, Since: q.since, Limit: 500})
		if err != nil {
			return last, false, err
		}
		for _, e := range batch {
			last = e.Seq
			if !auditVisible(p, e, q.project) {
				continue
			}
			if err := each(e); err != nil {
				return last, false, err
			}
			if n++; q.limit > 0 && n >= q.limit {
				return last, true, nil
			}
		}
		if len(batch) < 500 {
			return last, false, nil
		}
	}
}

// getAudit answers a page of the audit trail: {"entries": [...], "next":
// the URL of the next page, when there may be one}.
func (s *Server) getAudit(w http.ResponseWriter, r *http.Request) {
	if !manager(w, r) {
		return
	}
	q, perr := parseAuditQuery(r, auditDefaultLimit)
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	out := []*jobs.AuditEntry{}
	last, more, err := s.auditPage(r.Context(), caller(r.Context()), q, func(e *jobs.AuditEntry) error {
		out = append(out, e)
		return nil
	})
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	doc := map[string]any{"entries": out}
	if more {
		v := url.Values{"after": {strconv.FormatUint(last, 10)}, "limit": {strconv.Itoa(q.limit)}}
		if !q.since.IsZero() {
			v.Set("since", q.since.Format(time.RFC3339Nano))
		}
		if q.project != "" {
			v.Set("project", q.project)
		}
		doc["next"] = "/v1/audit?" + v.Encode()
	}
	writeJSON(w, http.StatusOK, doc)
}

// getAuditJSONL exports the audit trail the caller may read as JSON
// lines, one entry a line in trail order, all of them unless ?limit= is
// given.
func (s *Server) getAuditJSONL(w http.ResponseWriter, r *http.Request) {
	if !manager(w, r) {
		return
	}
	q, perr := parseAuditQuery(r, 0)
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	_ = http.NewResponseController(w).SetWriteDeadline(time.Now().Add(10 * time.Minute))
	started := false
	enc := json.NewEncoder(w)
	_, _, err := s.auditPage(r.Context(), caller(r.Context()), q, func(e *jobs.AuditEntry) error {
		if !started {
			started = true
			w.Header().Set("Content-Type", "application/jsonl; charset=utf-8")
			w.Header().Set("Content-Disposition", `attachment; filename="mottle-audit.jsonl"`)
			w.WriteHeader(http.StatusOK)
		}
		return enc.Encode(e)
	})
	if err != nil && !started {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	if err != nil {
		// The answer has begun: end it early; the client sees a
		// truncated export (no final entry) and the log says why.
		logger(r.Context()).Error("audit export cut short", "error", err.Error())
		return
	}
	if !started {
		w.Header().Set("Content-Type", "application/jsonl; charset=utf-8")
		w.Header().Set("Content-Disposition", `attachment; filename="mottle-audit.jsonl"`)
		w.WriteHeader(http.StatusOK)
	}
}

// cancelDetail says what a cancel did to job j.
func cancelDetail(j *jobs.Job) string {
	switch {
	case j.State == jobs.Canceled:
		return "canceled"
	case j.State == jobs.Running:
		return "stop asked of the running job"
	}
	return "already " + string(j.State) + "; nothing to cancel"
}
