package natsjs

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/synth"
)

// natsLab is two API nodes on one JetStream server with the token file
// of a lab: lead manages lab-a, rig-b submits in lab-b, lead-b manages
// lab-b.
type natsLab struct {
	t      *testing.T
	path   string
	recs   []*access.Record
	tokens map[string]string
	nodes  []*httptest.Server
	hc     *http.Client
}

func (l *natsLab) add(name string, g access.Grant) {
	tok, rec, err := access.NewToken(name, []access.Grant{g}, time.Now(), nil)
	if err != nil {
		l.t.Fatal(err)
	}
	l.tokens[name] = tok
	l.recs = append(l.recs, rec)
	var b bytes.Buffer
	if err := access.Format(&b, l.recs); err != nil {
		l.t.Fatal(err)
	}
	if err := os.WriteFile(l.path+".tmp", b.Bytes(), 0o600); err != nil {
		l.t.Fatal(err)
	}
	if err := os.Rename(l.path+".tmp", l.path); err != nil {
		l.t.Fatal(err)
	}
}

// node starts an API node on its own connection to url; work says
// whether it also computes jobs.
func (l *natsLab) node(url string, work bool) *Backend {
	t := l.t
	b := open(t, url, func(o *Options) { o.Work = work })
	f, err := access.OpenFile(l.path)
	if err != nil {
		t.Fatal(err)
	}
	s, err := service.New(service.Config{Backend: b.Jobs(), Analyzer: service.Pipeline{}, Workers: 1,
		TokenFile: f, Logger: discardLogger(), ShutdownGrace: time.Second})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := s.Start(testCtx(t))
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler())
	t.Cleanup(func() { ts.Close(); stop() })
	l.nodes = append(l.nodes, ts)
	return b
}

// call sends a request to node n as who and returns the status and body.
func (l *natsLab) call(n int, who, method, path, ctype string, body []byte) (int, []byte) {
	l.t.Helper()
	req, err := http.NewRequestWithContext(testCtx(l.t), method, l.nodes[n].URL+path, bytes.NewReader(body))
	if err != nil {
		l.t.Fatal(err)
	}
	req.Header.Set("Authorization", "Bearer "+l.tokens[who])
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := l.hc.Do(req)
	if err != nil {
		l.t.Fatalf("%s %s: %v", method, path, err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, b
}

func multipartOf(t *testing.T, parts map[string][]byte) (string, []byte) {
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	for _, n := range []string{"reference", "deformed", "params"} {
		data, ok := parts[n]
		if !ok {
			continue
		}
		h := textproto.MIMEHeader{}
		if n == "params" {
			h.Set("Content-Disposition", `form-data; name="params"`)
			h.Set("Content-Type", "application/json")
		} else {
			h.Set("Content-Disposition", fmt.Sprintf(`form-data; name=%q; filename="%s.png"`, n, n))
			h.Set("Content-Type", "image/png")
		}
		w, _ := mw.CreatePart(h)
		w.Write(data)
	}
	mw.Close()
	return mw.FormDataContentType(), b.Bytes()
}

// problemOf is a problem document without its instance and request id.
func problemOf(t *testing.T, b []byte) string {
	var p map[string]any
	if err := json.Unmarshal(b, &p); err != nil {
		t.Fatalf("not a problem document: %s", b)
	}
	delete(p, "instance")
	delete(p, "request_id")
	out, _ := json.Marshal(p)
	return string(out)
}

// TestAccessOnNATS: on the NATS backend a job and a series carry their
// project in the records of the key-value bucket, and the rules hold on
// every API node: another project's job is answered exactly as an
// unknown id and left out of lists, on the node that created it and on
// another. The audit trail is one for both nodes: the token file's
// changes are recorded once, however many nodes read the file.
func TestAccessOnNATS(t *testing.T) {
	url := runServer(t)
	l := &natsLab{t: t, path: filepath.Join(t.TempDir(), "tokens.jsonl"), tokens: map[string]string{},
		hc: &http.Client{Timeout: time.Minute}}
	l.add("lead", access.Grant{Project: "lab-a", Role: access.Manage})
	l.add("rig-b", access.Grant{Project: "lab-b", Role: access.Submit})
	l.add("lead-b", access.Grant{Project: "lab-b", Role: access.Manage})
	b := l.node(url, true)
	l.node(url, false)
	ctx := testCtx(t)

	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 3}, synth.Affine{F: [2][2]float64{{1.01, 0}, {0, 1}}, CX: 32, CY: 32, U: 0.5},
		synth.RenderOptions{W: 64, H: 64, Bits: 8, Noise: 1, Seed: 9})
	if err != nil {
		t.Fatal(err)
	}
	ct, body := multipartOf(t, map[string][]byte{"reference": pngBytes(t, ref), "deformed": pngBytes(t, def), "params": []byte(`{"subset":21,"step":10}`)})
	st, out := l.call(0, "lead", "POST", "/v1/analyses?wait=true", ct, body)
	if st != 200 {
		t.Fatalf("lead creates an analysis: %d %s", st, out)
	}
	aid := idOf(t, out)
	ct, body = multipartOf(t, map[string][]byte{"reference": pngBytes(t, ref)})
	st, out = l.call(1, "rig-b", "POST", "/v1/series", ct, body)
	if st != 201 {
		t.Fatalf("rig-b creates a series: %d %s", st, out)
	}
	sid := idOf(t, out)

	// The records in the bucket carry project and owner.
	for key, want := range map[string]string{jobKey(aid): `"project":"lab-a","owner":"lead"`, seriesKey(sid): `"project":"lab-b","owner":"rig-b"`} {
		e, err := b.store.kv.Get(ctx, key)
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Contains(e.Value(), []byte(want)) {
			t.Errorf("record %s lacks %s: %s", key, want, e.Value())
		}
	}

	unknown := strings.Repeat("0", 32)
	for n := range l.nodes {
		for _, c := range []struct{ who, method, path, gone string }{
			{"lead-b", "GET", "/v1/analyses/" + aid, "/v1/analyses/" + unknown},
			{"lead-b", "GET", "/v1/analyses/" + aid + "/field.json", "/v1/analyses/" + unknown + "/field.json"},
			{"lead-b", "DELETE", "/v1/analyses/" + aid, "/v1/analyses/" + unknown},
			{"lead", "GET", "/v1/series/" + sid, "/v1/series/" + unknown},
			{"lead", "DELETE", "/v1/series/" + sid, "/v1/series/" + unknown},
		} {
			st, b1 := l.call(n, c.who, c.method, c.path, "", nil)
			st2, b2 := l.call(n, c.who, c.method, c.gone, "", nil)
			if st != 404 || st2 != 404 || problemOf(t, b1) != problemOf(t, b2) {
				t.Errorf("node %d: %s %s as %s: %d %s; an unknown id: %d %s", n, c.method, c.path, c.who, st, b1, st2, b2)
			}
		}
		for _, c := range []struct{ who, path, id string }{{"lead-b", "/v1/analyses", aid}, {"lead", "/v1/series", sid}} {
			if st, b := l.call(n, c.who, "GET", c.path, "", nil); st != 200 || bytes.Contains(b, []byte(c.id)) {
				t.Errorf("node %d: %s lists %s: %d, holds another project's %s: %t", n, c.who, c.path, st, c.id, bytes.Contains(b, []byte(c.id)))
			}
		}
		for _, c := range []struct{ who, path string }{{"lead", "/v1/analyses/" + aid}, {"lead-b", "/v1/series/" + sid}} {
			if st, b := l.call(n, c.who, "GET", c.path, "", nil); st != 200 {
				t.Errorf("node %d: %s reads its own project's %s: %d %s", n, c.who, c.path, st, b)
			}
		}
	}

	// A token added to the file is noticed by both nodes, recorded once.
	l.add("auditor", access.Grant{Project: access.AllProjects, Role: access.Manage})
	for n := range l.nodes {
		if st, b := l.call(n, "auditor", "GET", "/v1/analyses", "", nil); st != 200 {
			t.Fatalf("node %d: the new token: %d %s", n, st, b)
		}
	}
	st, out = l.call(1, "auditor", "GET", "/v1/audit.jsonl", "", nil)
	if st != 200 {
		t.Fatalf("audit export: %d %s", st, out)
	}
	var got []string
	sc := bufio.NewScanner(bytes.NewReader(out))
	for sc.Scan() {
		var e jobs.AuditEntry
		if err := json.Unmarshal(sc.Bytes(), &e); err != nil {
			t.Fatal(err)
		}
		got = append(got, e.Action+" "+e.Resource+" "+e.Principal+" "+e.Project)
	}
	want := []string{"token-add token token-file ", "token-add token token-file ", "token-add token token-file ",
		"create analysis lead lab-a", "create series rig-b lab-b", "token-add token token-file "}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("audit trail:\n%s\nwant\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	st, out = l.call(0, "lead-b", "GET", "/v1/audit.jsonl", "", nil)
	if st != 200 || bytes.Contains(out, []byte(aid)) || !bytes.Contains(out, []byte(sid)) {
		t.Errorf("lead-b's audit export: %d, holds lab-a's analysis: %t, its own series: %t", st, bytes.Contains(out, []byte(aid)), bytes.Contains(out, []byte(sid)))
	}
}
