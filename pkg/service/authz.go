package service

import (
	"context"
	"crypto/rand"
	"encoding/base64"
	"fmt"
	"math"
	"net/http"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// This file is the whole authorization policy of the service: who the
// caller is (authenticate), what each route needs (routeNeeds), and the
// checks the resource resolvers, list handlers and create handlers call.

// scope says what a route's role is checked against.
type scope int

const (
	// scopeAny: the role in at least one project (documents, metrics).
	scopeAny scope = iota
	// scopeCreate: the role in the project the request chooses (header
	// X-Mottle-Project or ?project=, else the caller's default).
	scopeCreate
	// scopeList: lists hold only what the caller may read.
	scopeList
	// scopeResource: the role in the project of the job or series the
	// path names; another project's resource is answered 404.
	scopeResource
)

// need is a route's declaration: the least role and what it applies to.
// own lowers the role to Submit for the principal that created the job.
type need struct {
	role  access.Role
	scope scope
	own   bool
}

// routeNeeds declares, for every authenticated route pattern, what the
// caller needs. A route missing here is answered 500, and the route
// matrix test fails for it.
var routeNeeds = map[string]need{
	"GET /metrics":                              {access.Read, scopeAny, false},
	"GET /v1/openapi.json":                      {access.Read, scopeAny, false},
	"POST /v1/stream-tickets":                   {access.Read, scopeAny, false},
	"GET /v1/principal":                         {access.Read, scopeAny, false},
	"POST /v1/analyses":                         {access.Submit, scopeCreate, false},
	"GET /v1/analyses":                          {access.Read, scopeList, false},
	"POST /v1/demo":                             {access.Submit, scopeCreate, false},
	"POST /v1/images/check":                     {access.Submit, scopeCreate, false},
	"POST /v1/calibrations":                     {access.Submit, scopeCreate, false},
	"POST /v1/stereo":                           {access.Submit, scopeCreate, false},
	"POST /v1/stereo/series":                    {access.Submit, scopeCreate, false},
	"DELETE " + analysisPath:                    {access.Manage, scopeResource, false},
	"PATCH " + analysisPath:                     {access.Manage, scopeResource, false},
	"POST " + analysisPath + "/cancel":          {access.Manage, scopeResource, true},
	"POST /v1/series":                           {access.Submit, scopeCreate, false},
	"GET /v1/series":                            {access.Read, scopeList, false},
	"DELETE /v1/series/{id}":                    {access.Manage, scopeResource, false},
	"PATCH /v1/series/{id}":                     {access.Manage, scopeResource, false},
	"POST /v1/series/{id}/frames":               {access.Submit, scopeResource, false},
	"POST /v1/series/{id}/live":                 {access.Submit, scopeResource, false},
	"POST /v1/series/{id}/live/frames":          {access.Submit, scopeResource, false},
	"POST /v1/series/{id}/live/frames/{n}/full": {access.Submit, scopeResource, false},
	"GET /v1/audit":                             {access.Manage, scopeList, false},
	"GET /v1/audit.jsonl":                       {access.Manage, scopeList, false},
}

// needOf returns the declaration of the route pattern; GET routes under
// a job or series not declared above need Read on the resource.
func needOf(method, pattern string) (need, bool) {
	if n, ok := routeNeeds[method+" "+pattern]; ok {
		return n, true
	}
	if method == http.MethodGet && (strings.HasPrefix(pattern, analysisPath) || strings.HasPrefix(pattern, "/v1/series/{id}")) {
		return need{access.Read, scopeResource, false}, true
	}
	return need{}, false
}

const keyPrincipal ctxKey = 100

// caller returns the principal of the request (Everything outside the
// authenticated routes, which do not ask).
func caller(ctx context.Context) *access.Principal {
	if p, _ := ctx.Value(keyPrincipal).(*access.Principal); p != nil {
		return p
	}
	return access.Everything()
}

// authOn reports whether the server checks tokens.
func (s *Server) authOn() bool { return s.cfg.TokenFile != nil || len(s.tokens) > 0 }

// principalOf finds the principal of a bearer token, or nil.
func (s *Server) principalOf(token string) *access.Principal {
	if token == "" {
		return nil
	}
	if f := s.cfg.TokenFile; f != nil {
		rec, err := f.Lookup(token, time.Now())
		if err != nil {
			s.log.Error("token file", "error", err.Error())
		}
		if rec != nil {
			return rec.Who()
		}
	}
	if s.legacyToken(token) {
		p := access.Everything()
		p.Name = "token"
		return p
	}
	return nil
}

// authenticate finds the caller, checks the route's declaration in
// routeNeeds where it can be checked before the handler, and applies the
// per-principal request rate.
func (s *Server) authenticate(next http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		pattern := ""
		if rc := chi.RouteContext(r.Context()); rc != nil {
			pattern = rc.RoutePattern()
		}
		n, ok := needOf(r.Method, pattern)
		if !ok {
			writeProblem(w, r, problem(http.StatusInternalServerError, "internal", "Internal error", "the route "+r.Method+" "+pattern+" has no access declaration"))
			return
		}
		p := access.Everything()
		if s.authOn() {
			given, bearer := strings.CutPrefix(r.Header.Get("Authorization"), "Bearer ")
			p = s.principalOf(strings.TrimSpace(given))
			s.auditTokens(r.Context())
			if p == nil && !bearer && strings.HasSuffix(pattern, "/events") {
				p = s.tickets.redeem(r.URL.Query().Get("ticket"), time.Now())
			}
			if p == nil {
				w.Header().Set("WWW-Authenticate", `Bearer realm="mottle"`)
				detail := "send the header Authorization: Bearer <token> with a token of this server (event streams: ?ticket= from POST /v1/stream-tickets)"
				if bearer {
					detail = "the bearer token is not one the server accepts (unknown, revoked or expired)"
				}
				writeProblem(w, r, problem(http.StatusUnauthorized, "unauthorized", "Authentication required", detail,
					FieldProblem{"Authorization", detail}))
				return
			}
			if wait, limited := s.rates.take(p.Name, time.Now()); limited {
				retryAfter(w, wait)
				writeProblem(w, r, problem(http.StatusTooManyRequests, "rate-limited", "Too many requests",
					"principal "+p.Name+" is over its request rate; retry after the Retry-After seconds"))
				return
			}
		}
		ctx := context.WithValue(r.Context(), keyPrincipal, p)
		r = r.WithContext(ctx)
		switch n.scope {
		case scopeAny:
			best := access.None
			for _, g := range p.Grants {
				best = max(best, g.Role)
			}
			if best < n.role {
				forbid(w, r, p, n.role, "any project")
				return
			}
		case scopeCreate:
			proj, perr := chosenProject(r, p)
			if perr != nil {
				writeProblem(w, r, perr)
				return
			}
			if p.Role(proj) < n.role {
				forbid(w, r, p, n.role, "project "+proj)
				return
			}
		case scopeList:
			if proj := requestedProject(r); proj != "" && p.Role(proj) < n.role {
				forbid(w, r, p, n.role, "project "+proj)
				return
			}
		}
		next.ServeHTTP(w, r)
	})
}

func forbid(w http.ResponseWriter, r *http.Request, p *access.Principal, role access.Role, where string) {
	writeProblem(w, r, problem(http.StatusForbidden, "forbidden", "Forbidden",
		"principal "+p.Name+" needs the role "+role.String()+" in "+where+" for "+r.Method+" on this route"))
}

// requestedProject is the project named by the header X-Mottle-Project
// or the query parameter project, or "".
func requestedProject(r *http.Request) string {
	if v := r.Header.Get("X-Mottle-Project"); v != "" {
		return v
	}
	return r.URL.Query().Get("project")
}

// chosenProject is the project a create request puts its job in.
func chosenProject(r *http.Request, p *access.Principal) (string, *Problem) {
	proj := requestedProject(r)
	if proj == "" {
		return p.Default(), nil
	}
	if err := access.CheckName("project", proj); err != nil {
		return "", problem(http.StatusBadRequest, "bad-project", "Invalid project", err.Error(),
			FieldProblem{"X-Mottle-Project", "name a project of the token"})
	}
	return proj, nil
}

// projectOf returns the project of a record ("" is the default one).
func projectOf(p string) string {
	if p == "" {
		return access.DefaultProject
	}
	return p
}

// allowed checks the caller's role on a resource of project proj created
// by owner. It answers 404 when the caller has no role in the project
// (ids of other projects do not leak), 403 when the role is too low.
func (s *Server) allowed(w http.ResponseWriter, r *http.Request, proj, owner string) bool {
	p := caller(r.Context())
	pattern := chi.RouteContext(r.Context()).RoutePattern()
	n, _ := needOf(r.Method, pattern)
	role := p.Role(projectOf(proj))
	if role == access.None {
		// The very answer of an id that does not exist.
		writeProblem(w, r, asProblem(jobs.ErrNotFound, "id"))
		return false
	}
	want := n.role
	if n.own && owner != "" && owner == p.Name {
		want = min(want, access.Submit)
	}
	if role < want {
		forbid(w, r, p, want, "project "+projectOf(proj))
		return false
	}
	return true
}

// mayReplay checks, for a repeat under an Idempotency-Key, that the
// caller may still create in project proj of the resource the first
// request created: the token's grants may have changed since. It answers
// as allowed does (404 without a role there, 403 below submit).
func (s *Server) mayReplay(w http.ResponseWriter, r *http.Request, proj string) bool {
	p := caller(r.Context())
	switch role := p.Role(projectOf(proj)); {
	case role == access.None:
		writeProblem(w, r, asProblem(jobs.ErrNotFound, "id"))
		return false
	case role < access.Submit:
		forbid(w, r, p, access.Submit, "project "+projectOf(proj))
		return false
	}
	return true
}

// readable reports whether the caller may see records of project proj in
// a list, honouring a project the request names.
func readable(r *http.Request, proj string) bool {
	proj = projectOf(proj)
	if want := requestedProject(r); want != "" && want != proj {
		return false
	}
	return caller(r.Context()).Role(proj) >= access.Read
}

// tickets are short-lived single-use stream tickets: an EventSource
// cannot send a header, so the page trades its token for a ticket and
// puts the ticket, never the token, in the stream's URL.
type tickets struct {
	mu sync.Mutex
	m  map[string]ticket
}

type ticket struct {
	p       *access.Principal
	expires time.Time
}

// ticketLife is how long a stream ticket may wait to be used.
const ticketLife = 30 * time.Second

func (t *tickets) issue(p *access.Principal, now time.Time) (string, time.Time) {
	var b [24]byte
	_, _ = rand.Read(b[:])
	id := "st_" + base64.RawURLEncoding.EncodeToString(b[:])
	t.mu.Lock()
	defer t.mu.Unlock()
	if t.m == nil {
		t.m = map[string]ticket{}
	}
	for k, v := range t.m {
		if now.After(v.expires) {
			delete(t.m, k)
		}
	}
	exp := now.Add(ticketLife)
	t.m[id] = ticket{p, exp}
	return id, exp
}

func (t *tickets) redeem(id string, now time.Time) *access.Principal {
	if id == "" {
		return nil
	}
	t.mu.Lock()
	defer t.mu.Unlock()
	v, ok := t.m[id]
	delete(t.m, id)
	if !ok || now.After(v.expires) {
		return nil
	}
	return v.p
}

func (s *Server) postStreamTicket(w http.ResponseWriter, r *http.Request) {
	id, exp := s.tickets.issue(caller(r.Context()), time.Now())
	writeJSON(w, http.StatusCreated, map[string]any{"ticket": id, "expires": exp.UTC(),
		"use": "append ?ticket=<ticket> to one events URL within " + ticketLife.String() + "; each ticket opens one stream"})
}

// getPrincipal answers who the caller is: the principal, its grants and
// the project new work goes to, so that a page can show them and hide
// what the roles do not allow. It never holds the token.
func (s *Server) getPrincipal(w http.ResponseWriter, r *http.Request) {
	p := caller(r.Context())
	grants := p.Grants
	if grants == nil {
		grants = []access.Grant{}
	}
	writeJSON(w, http.StatusOK, map[string]any{"principal": p.Name, "grants": grants,
		"default_project": p.Default(), "tokens_required": s.authOn()})
}

// rates is a token bucket per principal: RateLimit requests a second,
// up to RateBurst at once.
type rates struct {
	rate, burst float64
	mu          sync.Mutex
	m           map[string]*bucket
}

type bucket struct {
	tokens float64
	last   time.Time
}

// take spends one request of principal name; when none is left it
// returns the seconds until one is, and true.
func (l *rates) take(name string, now time.Time) (float64, bool) {
	if l.rate <= 0 {
		return 0, false
	}
	l.mu.Lock()
	defer l.mu.Unlock()
	if l.m == nil {
		l.m = map[string]*bucket{}
	}
	b := l.m[name]
	if b == nil {
		b = &bucket{tokens: l.burst, last: now}
		l.m[name] = b
	}
	b.tokens = math.Min(l.burst, b.tokens+now.Sub(b.last).Seconds()*l.rate)
	b.last = now
	if b.tokens >= 1 {
		b.tokens--
		return 0, false
	}
	return math.Ceil((1 - b.tokens) / l.rate), true
}

var jobsQueued = jobs.Filter{States: []jobs.State{jobs.Queued}}

// ownerQueueFull answers 429 when the caller already has
// Config.MaxQueuedPerPrincipal jobs waiting.
func (s *Server) ownerQueueFull(w http.ResponseWriter, r *http.Request) bool {
	return s.ownerQueueFullN(w, r, 1)
}

// ownerQueueFullN answers 429 when k more jobs of the caller would be
// more than Config.MaxQueuedPerPrincipal waiting.
func (s *Server) ownerQueueFullN(w http.ResponseWriter, r *http.Request, k int) bool {
	if s.cfg.MaxQueuedPerPrincipal <= 0 || !s.authOn() {
		return false
	}
	name := caller(r.Context()).Name
	list, err := s.store.Jobs(r.Context(), jobsQueued)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return true
	}
	n := 0
	for _, j := range list {
		if j.Owner == name {
			n++
		}
	}
	if n+k <= s.cfg.MaxQueuedPerPrincipal {
		return false
	}
	retryAfter(w, s.retrySeconds())
	detail := "principal " + name + " has " + strconv.Itoa(n) + " jobs waiting, its limit; retry when some have started"
	if k > 1 {
		detail = fmt.Sprintf("principal %s has %d jobs waiting and the request would add %d, beyond its limit of %d; nothing was stored. Retry when some have started, or send fewer at once",
			name, n, k, s.cfg.MaxQueuedPerPrincipal)
	}
	writeProblem(w, r, problem(http.StatusTooManyRequests, "principal-queue-full", "Too many queued jobs", detail))
	return true
}
