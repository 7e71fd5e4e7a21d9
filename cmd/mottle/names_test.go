package main

import (
	"context"
	"encoding/json"
	"io"
	"log/slog"
	"net/http"
	"os"
	"path/filepath"
	"regexp"
	"sort"
	"strings"
	"testing"

	"github.com/go-chi/chi/v5"

	"github.com/mottledic/mottle/api"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/kinematics"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/embedded"
)

// retired lists names Mottle no longer uses, each with why (issue 18): a
// practitioner would tie them to one existing program, or they broke
// Mottle's own naming scheme (E11, H11, A11, eps11: letter of the measure,
// then what). A token matches when it equals the entry, or, for entries
// ending in "*", starts with its stem, ignoring case.
var retired = []struct{ name, why string }{
	{"e1", "principal strains are E_max, E_min"},
	{"e2", "principal strains are E_max, E_min"},
	{"principal_angle_deg", "the angle is E_max_angle_deg"},
	{"inspect*", "the image check is /v1/images/check, schema ImageCheck"},
	{"major", "largest principal strain, not major"},
	{"minor", "smallest principal strain, not minor"},
}

var nameToken = regexp.MustCompile(`[A-Za-z0-9_]+`)

// retiredIn returns the retired names among the tokens of s.
func retiredIn(s string) []string {
	var hits []string
	for _, tok := range nameToken.FindAllString(s, -1) {
		for _, r := range retired {
			if stem, ok := strings.CutSuffix(r.name, "*"); ok {
				if strings.HasPrefix(strings.ToLower(tok), stem) {
					hits = append(hits, tok+" ("+r.why+")")
				}
			} else if strings.EqualFold(tok, r.name) {
				hits = append(hits, tok+" ("+r.why+")")
			}
		}
	}
	return hits
}

// TestNoRetiredNames gathers every name the project exposes, from the code:
// the quantity tables (field.CanonicalNames with field.Describe, and
// kinematics.QuantityNames), every command's flags with their defaults and
// help (the flag sets, through --help), the chi router's routes, and the
// OpenAPI document's paths, schema names, operation ids and property
// names; and checks that none of them uses a retired name, and that the
// new names are there. The README's example values are checked too.
func TestNoRetiredNames(t *testing.T) {
	exposed := map[string][]string{} // where → texts
	add := func(where string, s ...string) { exposed[where] = append(exposed[where], s...) }

	for _, n := range field.CanonicalNames() {
		add("field quantity "+n, n, field.Describe(n))
	}
	add("kinematics.QuantityNames", kinematics.QuantityNames()...)

	for _, c := range commands() {
		e, out, _ := testEnv()
		if code := run(context.Background(), e, []string{c.name, "--help"}); code != 0 {
			t.Fatalf("%s --help: exit %d", c.name, code)
		}
		add("mottle "+c.name+" --help", out.String())
	}

	be, err := embedded.Open(t.TempDir(), 16)
	if err != nil {
		t.Fatal(err)
	}
	defer be.Close()
	srv, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	routes, ok := srv.Handler().(chi.Routes)
	if !ok {
		t.Fatalf("the service handler is %T, not a chi router", srv.Handler())
	}
	var paths []string
	if err := chi.Walk(routes, func(method, route string, _ http.Handler, _ ...func(http.Handler) http.Handler) error {
		paths = append(paths, method+" "+route)
		return nil
	}); err != nil {
		t.Fatal(err)
	}
	add("service routes", paths...)

	var doc struct {
		Paths      map[string]map[string]json.RawMessage `json:"paths"`
		Components struct {
			Schemas map[string]json.RawMessage `json:"schemas"`
		} `json:"components"`
	}
	if err := json.Unmarshal(api.OpenAPI(), &doc); err != nil {
		t.Fatalf("openapi.json: %v", err)
	}
	for p, ops := range doc.Paths {
		add("openapi path", p)
		for _, op := range ops {
			var o struct {
				OperationID string `json:"operationId"`
				Summary     string `json:"summary"`
			}
			if json.Unmarshal(op, &o) == nil {
				add("openapi operation "+p, o.OperationID, o.Summary)
			}
		}
	}
	var props func(where string, raw json.RawMessage)
	props = func(where string, raw json.RawMessage) {
		var s struct {
			Properties map[string]json.RawMessage `json:"properties"`
			Items      json.RawMessage            `json:"items"`
			Enum       []any                      `json:"enum"`
		}
		if json.Unmarshal(raw, &s) != nil {
			return
		}
		for name, sub := range s.Properties {
			add(where, name)
			props(where+"."+name, sub)
		}
		if len(s.Items) > 0 {
			props(where+"[]", s.Items)
		}
		for _, e := range s.Enum {
			if v, ok := e.(string); ok {
				add(where, v)
			}
		}
	}
	for name, raw := range doc.Components.Schemas {
		add("openapi schema", name)
		props("openapi schema "+name, raw)
	}

	var bad []string
	all := map[string]bool{}
	for where, texts := range exposed {
		for _, s := range texts {
			for _, tok := range nameToken.FindAllString(s, -1) {
				all[tok] = true
			}
			for _, h := range retiredIn(s) {
				bad = append(bad, where+": "+h)
			}
		}
	}
	sort.Strings(bad)
	for _, b := range bad {
		t.Error("retired name: " + b)
	}
	for _, want := range []string{"E_max", "E_min", "E_max_angle_deg", "ImageCheck", "check"} {
		if !all[want] {
			t.Errorf("no exposed name %q: the new names are missing", want)
		}
	}
	if !strings.Contains(strings.Join(exposed["service routes"], "\n"), "POST /v1/images/check") {
		t.Error("the router has no POST /v1/images/check")
	}

	// The documents a practitioner reads name the same things.
	for _, doc := range []string{"README.md", "DEVELOPERS.md", "web/static/js/app.js", "web/static/index.html"} {
		b, err := os.ReadFile(filepath.Join("..", "..", doc))
		if err != nil {
			t.Fatal(err)
		}
		s := string(b)
		if strings.Contains(s, "--subset 29 --step 7") {
			t.Errorf("%s keeps the example --subset 29 --step 7", doc)
		}
		for _, q := range []string{"`e1`", "`e2`", "'e1'", "'e2'", `"e1"`, `"e2"`, "images/inspect", "principal_angle_deg"} {
			if strings.Contains(s, q) {
				t.Errorf("%s still names %s", doc, q)
			}
		}
	}
}
