package service_test

import (
	"encoding/json"
	"net/http"
	"sort"
	"strings"
	"testing"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/api"
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
