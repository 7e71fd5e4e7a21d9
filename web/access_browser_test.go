package web_test

// Browser test of signing in: a server of this process with a token file
// of two projects; the page signs in with a token kept in sessionStorage
// only, shows the principal, its project and role, hides what the role
// does not allow, lists only the caller's projects, and follows an
// analysis through server-sent events opened with a stream ticket.

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/access"
	"github.com/mottledic/mottle/pkg/service/embedded"
	"github.com/mottledic/mottle/pkg/synth"
	"github.com/mottledic/mottle/web"
)

// accessAllowed: before signing in, the page asks who it is and loads the
// list of earlier work; a server with tokens answers both 401.
var accessAllowed = []allowance{
	{regexp.MustCompile(`^request GET \S+/v1/(principal|analyses\?limit=100): 401 `),
		"the page loads without a token: GET /v1/principal and the list are refused, and the page asks to sign in"},
	{regexp.MustCompile(`^console error \(network\): Failed to load resource: the server responded with a status of 401 \(Unauthorized\) \S+/v1/(principal|analyses\?limit=100)$`),
		"Chromium logs each of the two 401 answers before signing in"},
}

// tokenServer serves the preview and the API from this process with the
// token file of two projects; it returns the base URL and the tokens.
func tokenServer(t *testing.T) (string, map[string]string) {
	t.Helper()
	dir := t.TempDir()
	toks := map[string]string{}
	var recs []*access.Record
	for _, p := range []struct {
		name string
		g    access.Grant
	}{{"wall-display", access.Grant{Project: "lab-a", Role: access.Read}}, {"rig-3", access.Grant{Project: "lab-a", Role: access.Submit}},
		{"lead-a", access.Grant{Project: "lab-a", Role: access.Manage}}, {"lead-b", access.Grant{Project: "lab-b", Role: access.Manage}}} {
		tok, rec, err := access.NewToken(p.name, []access.Grant{p.g}, time.Now(), nil)
		if err != nil {
			t.Fatal(err)
		}
		toks[p.name] = tok
		recs = append(recs, rec)
	}
	var buf bytes.Buffer
	if err := access.Format(&buf, recs); err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "tokens.jsonl")
	if err := os.WriteFile(path, buf.Bytes(), 0o600); err != nil {
		t.Fatal(err)
	}
	f, err := access.OpenFile(path)
	if err != nil {
		t.Fatal(err)
	}
	be, err := embedded.Open(filepath.Join(dir, "data"), 8)
	if err != nil {
		t.Fatal(err)
	}
	srv, err := service.New(service.Config{Backend: be, Analyzer: service.Pipeline{}, Workers: 1, UI: web.Assets(), TokenFile: f,
		ShutdownGrace: time.Second, Logger: slog.New(slog.NewJSONHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	stop, err := srv.Start(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	hs := httptest.NewServer(srv.Handler())
	t.Cleanup(func() { hs.Close(); stop(); be.Close() })
	return hs.URL, toks
}

// apiAs sends a request with a token and returns the status and body.
func apiAs(t *testing.T, base, tok, method, path, ctype string, body []byte) (int, []byte) {
	t.Helper()
	req, err := http.NewRequest(method, base+path, bytes.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	req.Header.Set("Authorization", "Bearer "+tok)
	if ctype != "" {
		req.Header.Set("Content-Type", ctype)
	}
	resp, err := (&http.Client{Timeout: time.Minute}).Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, b
}

// smallPair writes an invented pair (a 0.4 px shift) to dir and returns
// its paths and the multipart body of an analysis of it.
func smallPair(t *testing.T, dir string) (refPath, defPath, ctype string, body []byte) {
	t.Helper()
	ref, def, err := synth.Pair(synth.PatternOptions{Diameter: 4, Seed: 7}, synth.Affine{F: [2][2]float64{{1, 0}, {0, 1}}, CX: 48, CY: 48, U: 0.4},
		synth.RenderOptions{W: 96, H: 96, Bits: 8, Supersample: 2})
	if err != nil {
		t.Fatal(err)
	}
	refPath, defPath = filepath.Join(dir, "ref.png"), filepath.Join(dir, "def.png")
	var b bytes.Buffer
	mw := multipart.NewWriter(&b)
	for name, g := range map[string]*imageio.Gray{"reference": ref, "deformed": def} {
		p := map[string]string{"reference": refPath, "deformed": defPath}[name]
		if err := imageio.WriteFile(p, g, 8); err != nil {
			t.Fatal(err)
		}
		data, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		h := textproto.MIMEHeader{}
		h.Set("Content-Disposition", fmt.Sprintf(`form-data; name=%q; filename="%s.png"`, name, name))
		h.Set("Content-Type", "image/png")
		w, _ := mw.CreatePart(h)
		w.Write(data)
	}
	h := textproto.MIMEHeader{}
	h.Set("Content-Disposition", `form-data; name="params"`)
	h.Set("Content-Type", "application/json")
	w, _ := mw.CreatePart(h)
	w.Write([]byte(`{"subset":21,"step":8}`))
	mw.Close()
	return refPath, defPath, mw.FormDataContentType(), b.Bytes()
}

func TestBrowserSignIn(t *testing.T) {
	if _, err := os.Stat(chromium); err != nil {
		t.Fatalf("the browser tests need Debian's chromium at %s; install it with `apt-get install chromium` (%v)", chromium, err)
	}
	art := artifacts(t)
	base, toks := tokenServer(t)
	refPath, defPath, ct, body := smallPair(t, t.TempDir())
	created := map[string]string{}
	for who, proj := range map[string]string{"lead-a": "lab-a", "lead-b": "lab-b"} {
		st, b := apiAs(t, base, toks[who], "POST", "/v1/analyses?wait=true&name="+proj+"-analysis", ct, body)
		if st != 200 {
			t.Fatalf("%s creates an analysis: %d %s", who, st, b)
		}
		var j struct{ ID string }
		json.Unmarshal(b, &j)
		created[proj] = j.ID
	}
	ctx := newBrowser(t)
	b := newPage(t, ctx, art, accessAllowed)

	b.run("load the page", chromedp.Navigate(base+"/"), chromedp.WaitVisible(chromedp.ID("btn-signin")))
	b.wait(`document.body.dataset.ready === "true" && document.body.dataset.signedIn === "false"`, "the page did not find out that it is not signed in")
	if msg := b.text("#signin-msg"); !strings.Contains(msg, "asks for an access token") {
		t.Errorf("before signing in the page says %q", msg)
	}
	if role := b.str(`document.body.dataset.role`); role != "none" {
		t.Errorf("role before signing in %q, want none", role)
	}

	signIn := func(who string) {
		t.Helper()
		b.step("sign in as " + who)
		b.run("enter the token of "+who, setValue("#token", toks[who]), b.click("#btn-signin"))
		b.wait(fmt.Sprintf(`document.getElementById("who").dataset.principal === %q && %s`, who, shelfSettled), who+" was not signed in")
	}
	shown := func(sel string) bool {
		t.Helper()
		return b.str(fmt.Sprintf(`(() => { const e = document.querySelector(%q); return e && e.getClientRects().length > 0 ? "yes" : "no"; })()`, sel)) == "yes"
	}
	listed := func() string {
		t.Helper()
		return b.str(`[...document.querySelectorAll('#work-list .work-item')].map(li => li.dataset.id + ':' + li.dataset.project + ':' + [...li.querySelectorAll('.work-acts button')].filter(x => x.getClientRects().length).map(x => x.textContent).join('/')).sort().join(' ')`)
	}

	signIn("wall-display")
	if who := b.text("#who"); who != "wall-display · lab-a · read" {
		t.Errorf("signed in as the display, the page shows %q", who)
	}
	for _, sel := range []string{"#btn-run", "#btn-demo", "#file-reference", "#s-start", "#cal-run"} {
		if shown(sel) {
			t.Errorf("the read-only display sees %s", sel)
		}
	}
	if got, want := listed(), created["lab-a"]+":lab-a:Open"; got != want {
		t.Errorf("the display's list: %q, want only lab-a's analysis with Open alone", got)
	}
	if where := b.str(`JSON.stringify({session: sessionStorage.getItem("mottle-token") !== null, local: localStorage.length, url: location.href})`); where != fmt.Sprintf(`{"session":true,"local":0,"url":"%s/"}`, base) {
		t.Errorf("where the token is kept: %s, want sessionStorage only", where)
	}
	b.shot("signed-in-display.png", "")

	signIn("rig-3")
	if !shown("#btn-run") || shown(`#work-list .work-item button[aria-label^="Delete"]`) {
		t.Errorf("the rig (submit) must see Run and no Delete: run %v, delete %v", shown("#btn-run"), shown(`#work-list .work-item button[aria-label^="Delete"]`))
	}
	b.step("the rig runs an analysis; its events come through a stream ticket")
	b.run("choose the pair and run",
		chromedp.SetUploadFiles(chromedp.ID("file-reference"), []string{refPath}),
		chromedp.SetUploadFiles(chromedp.ID("file-deformed"), []string{defPath}))
	b.wait(`/96 × 96 px/.test(document.getElementById("info-deformed").textContent) && /96 × 96 px/.test(document.getElementById("info-reference").textContent)`, "the chosen files were not read")
	b.run("run", b.click("#btn-roi-clear"), setValue("#p-subset", "21"), setValue("#p-step", "8"),
		eval(`mottlePreview.state.events = 0`), b.click("#btn-run"))
	b.waitResult()
	if n := b.number(`mottlePreview.state.events`); n < 1 {
		t.Errorf("%v server-sent events reached the page signed in with a token", n)
	}
	rigJob := b.str(`mottlePreview.state.tracking ? mottlePreview.state.tracking.id : (new URLSearchParams(location.search)).get("analysis") || ""`)
	b.run("open a stream with the page's module", eval(`window.__ev = []; import("./js/api.js").then(m => m.openEvents("/v1/analyses/`+created["lab-a"]+`/events")).then(es => { window.__url = es.url; es.onmessage = e => __ev.push("message"); for (const n of ["state", "progress", "done", "end", "succeeded"]) es.addEventListener(n, () => __ev.push(n)); })`))
	b.wait(`window.__ev.length > 0`, "no event on a stream opened with a ticket")
	if u := b.str(`window.__url`); !strings.Contains(u, "?ticket=st_") || strings.Contains(u, toks["rig-3"]) {
		t.Errorf("event stream URL %q: want a ticket, never the token", u)
	}

	signIn("lead-a")
	b.run("refresh the list", b.click("#shelf-refresh"))
	b.wait(shelfSettled+` && document.querySelectorAll('#work-list .work-item').length >= 2`, "the lead's list did not load")
	if got := listed(); !strings.Contains(got, created["lab-a"]+":lab-a:Open/Rename/Delete") || strings.Contains(got, created["lab-b"]) {
		t.Errorf("the lead's list %q: want lab-a's items with Rename and Delete, nothing of lab-b", got)
	}
	b.step("the lead deletes lab-a's first analysis from the list")
	del := fmt.Sprintf(`#work-list .work-item[data-id="%s"] button[aria-label^="Delete"]`, created["lab-a"])
	b.run("delete and confirm", b.click(del), b.click(del))
	b.wait(fmt.Sprintf(`!document.querySelector('#work-list .work-item[data-id="%s"]')`, created["lab-a"]), "the deleted item is still listed")
	st, audit := apiAs(t, base, toks["lead-a"], "GET", "/v1/audit?project=lab-a", "", nil)
	if st != 200 || !strings.Contains(string(audit), `"action": "delete"`) || !strings.Contains(string(audit), created["lab-a"]) {
		t.Errorf("the audit trail after the delete: %d %s", st, audit)
	}
	if rigJob != "" && !strings.Contains(string(audit), rigJob) {
		t.Errorf("the rig's analysis %s is not in lab-a's audit trail", rigJob)
	}

	b.step("sign out")
	b.run("sign out", b.click("#btn-signout"))
	b.wait(`document.body.dataset.signedIn === "false" && sessionStorage.getItem("mottle-token") === null`, "signing out kept the token")
	b.finish()
	for _, u := range b.w.requests {
		for who, tok := range toks {
			if strings.Contains(u, tok) {
				t.Errorf("request %s holds %s's token in its URL", u, who)
			}
		}
	}
}
