package service

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"
	"sync"
	"time"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// maxKeyLen is the longest Idempotency-Key value accepted, in characters
// (the header draft of the IETF httpapi working group sets no limit; 255
// holds a UUID, a ULID or a lab system's sample and frame names with room
// to spare).
const maxKeyLen = 255

// parseIdempotencyKey returns the value of the Idempotency-Key header of h
// and whether there is one. The draft defines the value as a Structured
// Field string (RFC 8941 section 3.3.3: "..." of printable ASCII with \"
// and \\ escapes); a bare value of visible ASCII is accepted too, since
// most clients send one. An empty, repeated, too long or non-ASCII value
// is an error.
func parseIdempotencyKey(h http.Header) (string, bool, error) {
	vals := h.Values("Idempotency-Key")
	if len(vals) == 0 {
		return "", false, nil
	}
	if len(vals) > 1 {
		return "", true, errors.New("is sent more than once; send it once per request")
	}
	v := strings.Trim(vals[0], " \t")
	var key string
	if strings.HasPrefix(v, `"`) {
		var b strings.Builder
		i := 1
		for ; i < len(v) && v[i] != '"'; i++ {
			c := v[i]
			if c == '\\' {
				i++
				if i == len(v) || (v[i] != '"' && v[i] != '\\') {
					return "", true, errors.New(`has a backslash that is not followed by " or \; only \" and \\ are escapes in a quoted key`)
				}
				c = v[i]
			} else if c < 0x20 || c > 0x7e {
				return "", true, fmt.Errorf("holds the byte 0x%02x; use printable ASCII", c)
			}
			b.WriteByte(c)
		}
		if i >= len(v) {
			return "", true, errors.New("has no closing quote")
		}
		if i != len(v)-1 {
			return "", true, errors.New("has something after the closing quote; parameters are not accepted")
		}
		key = b.String()
	} else {
		for i := 0; i < len(v); i++ {
			if c := v[i]; c <= 0x20 || c > 0x7e {
				return "", true, fmt.Errorf("holds the byte 0x%02x; use visible ASCII without spaces, or quote the key", c)
			}
		}
		key = v
	}
	if key == "" {
		return "", true, errors.New("is empty")
	}
	if len(key) > maxKeyLen {
		return "", true, fmt.Errorf("is %d characters long; at most %d are accepted", len(key), maxKeyLen)
	}
	return key, true, nil
}

// idem is what a handler running under an Idempotency-Key finds in its
// request's context.
type idem struct {
	id      string // the id the created resource must get
	once    sync.Once
	created func()
}

type idemCtx struct{}

// newID returns the id a handler gives the resource it creates: the one
// chosen under the request's Idempotency-Key, or a new one.
func newID(r *http.Request) string {
	if in, ok := r.Context().Value(idemCtx{}).(*idem); ok {
		return in.id
	}
	return jobs.NewID()
}

// idemResource returns the resource id chosen under the request's
// Idempotency-Key, and whether the request has one.
func idemResource(r *http.Request) (string, bool) {
	if in, ok := r.Context().Value(idemCtx{}).(*idem); ok {
		return in.id, true
	}
	return "", false
}

// created tells the Idempotency-Key handling that the resource of r now
// exists: a repeat of the request waiting for the first one goes on, and
// is answered from the resource.
func created(r *http.Request) {
	if in, ok := r.Context().Value(idemCtx{}).(*idem); ok {
		in.once.Do(in.created)
	}
}

// keyLocks serialises requests of one key in this process, so a repeat
// sent while the first is creating the resource waits for it. Across
// processes (the NATS backend) the Store's create-only records and the
// resource id fixed in the key record keep a concurrent repeat from
// creating a second resource.
type keyLocks struct {
	mu sync.Mutex
	m  map[string]*keyLock
}

type keyLock struct {
	ch chan struct{} // holds one token while the key is locked
	n  int           // requests holding or waiting
}

func (l *keyLocks) lock(ctx context.Context, id string) (unlock func(), err error) {
	l.mu.Lock()
	if l.m == nil {
		l.m = map[string]*keyLock{}
	}
	k := l.m[id]
	if k == nil {
		k = &keyLock{ch: make(chan struct{}, 1)}
		l.m[id] = k
	}
	k.n++
	l.mu.Unlock()
	release := func() {
		l.mu.Lock()
		if k.n--; k.n == 0 {
			delete(l.m, id)
		}
		l.mu.Unlock()
	}
	select {
	case k.ch <- struct{}{}:
	case <-ctx.Done():
		release()
		return nil, ctx.Err()
	}
	var once sync.Once
	return func() { once.Do(func() { <-k.ch; release() }) }, nil
}

// idempotent wraps a POST handler that creates a resource of kind
// ("analysis", "series", "frame" or "live-frame": a frame taken by a live
// session, whose first answer the session keeps for repeats) with the handling of the
// Idempotency-Key header: the first request with a key does the work under
// a resource id recorded with the key before anything is created; a repeat
// with the same method, path, query and body is answered from that
// resource (waiting for the first if it is still creating it, or creating
// it if the first died before); a repeat with anything else is refused
// with 422. Without the header, h runs as it is.
func (s *Server) idempotent(kind string, h http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		key, ok, err := parseIdempotencyKey(r.Header)
		if err != nil {
			writeProblem(w, r, problem(http.StatusBadRequest, "bad-idempotency-key", "Invalid Idempotency-Key",
				"the Idempotency-Key header "+err.Error(),
				FieldProblem{"Idempotency-Key", "send one key of 1 to 255 visible ASCII characters per request, e.g. a UUID"}))
			return
		}
		if !ok {
			h(w, r)
			return
		}
		body, err := readAllLimited(w, r, s.cfg.MaxBodyBytes)
		if err != nil {
			writeProblem(w, r, asProblem(bodyErr(err, "body"), "body"))
			return
		}
		r.Body = io.NopCloser(bytes.NewReader(body))
		fp := fingerprint(r, body)
		id := jobs.KeyID(keyScope(r), key)
		ctx := r.Context()
		unlock, err := s.keyLocks.lock(ctx, id)
		if err != nil {
			return // the client went away
		}
		defer unlock()

		k, err := s.store.Key(ctx, id)
		if errors.Is(err, jobs.ErrNotFound) {
			k = &jobs.Key{ID: id, Fingerprint: fp, Kind: kind, Resource: jobs.NewID(), Created: time.Now().UTC()}
			if kind == "live-frame" {
				k.Series = chi.URLParam(r, "id")
			}
			if err = s.store.CreateKey(ctx, k); errors.Is(err, jobs.ErrExists) {
				k, err = s.store.Key(ctx, id) // another instance was first
			}
		}
		if err != nil {
			writeProblem(w, r, asProblem(err, "Idempotency-Key"))
			return
		}
		if k.Fingerprint != fp || k.Kind != kind {
			writeProblem(w, r, problem(http.StatusUnprocessableEntity, "idempotency-key-reused", "Idempotency-Key reused",
				"the Idempotency-Key was first sent with another request (its method, path, query or body differ from this one's); "+
					"a repeat must be the same request, and a new request needs a new key",
				FieldProblem{"Idempotency-Key", "use a new key for a new request"}))
			return
		}
		if s.replay(w, r, k) {
			return
		}
		if k.Done {
			writeProblem(w, r, problem(http.StatusGone, "idempotency-key-deleted", "Created resource deleted",
				"the request with this Idempotency-Key was done, and what it created has been deleted since; send it with a new key to do it again",
				FieldProblem{"Idempotency-Key", "use a new key"}))
			return
		}
		in := &idem{id: k.Resource}
		in.created = func() {
			done := *k
			done.Done = true
			if err := s.store.PutKey(context.WithoutCancel(ctx), &done); err != nil {
				logger(ctx).Warn("idempotency key: record done", "error", err)
			}
			unlock()
		}
		h(w, r.WithContext(context.WithValue(ctx, idemCtx{}, in)))
		if !s.resourceExists(context.WithoutCancel(ctx), k) {
			// Refused or failed before creating anything: the key
			// leaves no trace either, and a retry does the work.
			if err := s.store.DeleteKey(context.WithoutCancel(ctx), id); err != nil {
				logger(ctx).Warn("idempotency key: delete after refusal", "error", err)
			}
		}
	}
}

// fingerprint is the hex SHA-256 of the request's method, path, query and
// body: what a repeat of a request must match.
func fingerprint(r *http.Request, body []byte) string {
	h := sha256.New()
	fmt.Fprintf(h, "%s\x00%s\x00%s\x00%d\x00", r.Method, r.URL.Path, r.URL.RawQuery, len(body))
	h.Write(body)
	return hex.EncodeToString(h.Sum(nil))
}

// keyScope is the client's credentials, as far as they tell clients apart,
// and the project the request names: keys of different tokens, or of one
// token in different projects, never meet.
func keyScope(r *http.Request) string {
	tok, _ := strings.CutPrefix(r.Header.Get("Authorization"), "Bearer ")
	scope := strings.TrimSpace(tok)
	if p := requestedProject(r); p != "" {
		scope += "\x00" + p
	}
	sum := sha256.Sum256([]byte(scope))
	return hex.EncodeToString(sum[:])
}

func (s *Server) resourceExists(ctx context.Context, k *jobs.Key) bool {
	var err error
	if k.Kind == "live-frame" {
		return s.liveFrameExists(k)
	}
	if k.Kind == "series" {
		_, err = s.store.Series(ctx, k.Resource)
	} else {
		_, err = s.store.Job(ctx, k.Resource)
	}
	return err == nil
}

// replay answers a repeat of a request from the resource the first one
// created, as the first was answered: the same status, Location and
// record. It returns false if the resource does not exist (yet).
func (s *Server) replay(w http.ResponseWriter, r *http.Request, k *jobs.Key) bool {
	ctx := r.Context()
	if k.Kind == "live-frame" {
		return s.liveReplay(w, r, k)
	}
	if k.Kind == "series" {
		sr, err := s.store.Series(ctx, k.Resource)
		if err != nil {
			return false
		}
		if !s.mayReplay(w, r, sr.Project) {
			return true
		}
		w.Header().Set("Location", "/v1/series/"+sr.ID)
		writeJSON(w, http.StatusCreated, s.viewSeries(ctx, sr, false))
		return true
	}
	j, err := s.store.Job(ctx, k.Resource)
	if err != nil {
		return false
	}
	if !s.mayReplay(w, r, j.Project) {
		return true
	}
	wait, err := boolQuery(r, "wait", k.Kind == "frame")
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return true
	}
	s.answerJob(w, r, j, wait)
	return true
}
