package service_test

import (
	"encoding/json"
	"io"
	"net/http"
	"sort"
	"strings"
	"testing"
	"testing/fstest"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/api"
	"github.com/mottledic/mottle/pkg/service"
)

// TestRoutesMatchOpenAPI checks that every route of the router is in the
// OpenAPI document with its method, and every operation of the document is
// a route. The browser page's catch-all "/*" is the only route left out: it
// serves static files, not the API.
func TestRoutesMatchOpenAPI(t *testing.T) {
	ts := newServer(t, nil)
	routes, ok := ts.srv.Handler().(chi.Routes)
	if !ok {
		t.Fatalf("handler is %T, not a chi router", ts.srv.Handler())
	}
	got := map[string]bool{}
	err := chi.Walk(routes, func(method, route string, _ http.Handler, _ ...func(http.Handler) http.Handler) error {
		if route == "/*" {
			return nil
		}
		got[method+" "+route] = true
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	var doc struct {
		OpenAPI string                                `json:"openapi"`
		Paths   map[string]map[string]json.RawMessage `json:"paths"`
	}
	if err := json.Unmarshal(api.OpenAPI(), &doc); err != nil {
		t.Fatalf("openapi.json: %v", err)
	}
	if !strings.HasPrefix(doc.OpenAPI, "3.") {
		t.Errorf("openapi version %q, want 3.x", doc.OpenAPI)
	}
	want := map[string]bool{}
	for path, ops := range doc.Paths {
		for m := range ops {
			switch m {
			case "get", "post", "put", "delete", "patch", "head", "options":
				want[strings.ToUpper(m)+" "+path] = true
			}
		}
	}
	var missing, extra []string
	for k := range got {
		if !want[k] {
			missing = append(missing, k)
		}
	}
	for k := range want {
		if !got[k] {
			extra = append(extra, k)
		}
	}
	sort.Strings(missing)
	sort.Strings(extra)
	for _, k := range missing {
		t.Errorf("route %s is not in api/openapi.json", k)
	}
	for _, k := range extra {
		t.Errorf("api/openapi.json has %s, which the router lacks", k)
	}
	if len(got) < 30 {
		t.Errorf("only %d routes walked; the walk is broken", len(got))
	}
}

// TestOpenAPIServed checks the document is served and is the embedded one.
func TestOpenAPIServed(t *testing.T) {
	ts := newServer(t, nil)
	resp, b := ts.do(t, "GET", "/v1/openapi.json", "", nil)
	if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != "application/json" {
		t.Fatalf("GET /v1/openapi.json: %d %s", resp.StatusCode, resp.Header.Get("Content-Type"))
	}
	if string(b) != string(api.OpenAPI()) {
		t.Error("served document differs from the embedded one")
	}
}

// TestUI serves the preview's files at / without a token, and keeps
// unknown API paths answered by the API.
func TestUI(t *testing.T) {
	ui := fstest.MapFS{"index.html": {Data: []byte("<!doctype html><title>Mottle</title>")}}
	ts := newServer(t, func(c *service.Config) { c.UI = ui; c.Tokens = []string{"ui-test-token-0123456789"} })
	resp, err := ts.client().Get(ts.URL + "/")
	if err != nil {
		t.Fatal(err)
	}
	b, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	if resp.StatusCode != 200 || !strings.Contains(string(b), "Mottle") {
		t.Errorf("GET /: %d %s", resp.StatusCode, b)
	}
	for _, p := range []string{"/v1/nothing", "/v1/analyses/x/y/z"} {
		resp, err := ts.client().Get(ts.URL + p)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != 401 && resp.StatusCode != 404 || resp.Header.Get("Content-Type") != "application/problem+json" {
			t.Errorf("GET %s: %d %s, want a 401/404 problem", p, resp.StatusCode, resp.Header.Get("Content-Type"))
		}
	}
}
