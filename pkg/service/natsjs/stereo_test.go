package natsjs

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"mime/multipart"
	"net/http"
	"net/http/httptest"
	"net/textproto"
	"testing"
	"time"

	"github.com/mottledic/mottle/internal/stereobench"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestStereoSeriesNATS: a stereo series stored in the NATS backend goes on
// on another node: one node creates it with the reference pair and one
// more pair and measures that pair; it is stopped; a new node on the same
// NATS server takes the next pair, continuing from the state the first
// node stored in the object store (the reference pair is not matched
// again). The plane is stretched 0.3 % and 0.6 % along x: the
// extensometer, measured in space, reads each within 2e-4 (the imposed
// homogeneous stretch is the rendered scene's closed-form truth).
func TestStereoSeriesNATS(t *testing.T) {
	const w, h = 320, 240
	url := runServer(t)
	rig, err := stereobench.RigFile(w, h)
	if err != nil {
		t.Fatal(err)
	}
	lc, rc, _ := stereobench.Rig(w, h)
	pat, err := stereobench.Pattern(11, 4)
	if err != nil {
		t.Fatal(err)
	}
	strains := []float64{0, 0.003, 0.006}
	var pairs [][2][]byte
	for k, ea := range strains {
		pl := synth.Placement{Shape: synth.Plane{}, Motion: synth.Affine{F: [2][2]float64{{1 + ea, 0}, {0, 1}}}}
		var pr [2][]byte
		for s, c := range []synth.Cam{lc, rc} {
			g, _, err := synth.RenderSurface(pat, pl, c, synth.RenderOptions{W: w, H: h, Supersample: 2, Noise: 0.5, Seed: int64(10 + 2*k + s)})
			if err != nil {
				t.Fatal(err)
			}
			var b bytes.Buffer
			if err := imageio.WritePNG(&b, g, 8); err != nil {
				t.Fatal(err)
			}
			pr[s] = b.Bytes()
		}
		pairs = append(pairs, pr)
	}
	node := func() (*httptest.Server, func()) {
		b := open(t, url, nil)
		s, err := service.New(service.Config{Backend: b.Jobs(), Analyzer: service.Pipeline{}, Workers: 1, Logger: discardLogger(), ShutdownGrace: time.Second})
		if err != nil {
			t.Fatal(err)
		}
		stop, err := s.Start(testCtx(t))
		if err != nil {
			t.Fatal(err)
		}
		ts := httptest.NewServer(s.Handler())
		return ts, func() { ts.Close(); stop() }
	}
	post := func(ts *httptest.Server, path string, parts [][3]string, data [][]byte, want int) []byte {
		t.Helper()
		var b bytes.Buffer
		mw := multipart.NewWriter(&b)
		for k, p := range parts {
			hd := textproto.MIMEHeader{}
			hd.Set("Content-Disposition", fmt.Sprintf(`form-data; name=%q; filename=%q`, p[0], p[1]))
			hd.Set("Content-Type", p[2])
			pw, _ := mw.CreatePart(hd)
			pw.Write(data[k])
		}
		mw.Close()
		req, _ := http.NewRequestWithContext(testCtx(t), "POST", ts.URL+path, &b)
		req.Header.Set("Content-Type", mw.FormDataContentType())
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		defer resp.Body.Close()
		body, _ := io.ReadAll(resp.Body)
		if resp.StatusCode != want {
			t.Fatalf("POST %s: %d %s, want %d", path, resp.StatusCode, body, want)
		}
		return body
	}
	params := []byte(`{"step": 12, "extensometers": [{"name": "axial", "a": [70, 120], "b": [250, 120]}]}`)
	a, stopA := node()
	b := post(a, "/v1/stereo/series?wait=true",
		[][3]string{{"rig", "rig.json", "application/json"}, {"params", "params.json", "application/json"},
			{"left", "L0.png", "image/png"}, {"right", "R0.png", "image/png"}, {"left", "L1.png", "image/png"}, {"right", "R1.png", "image/png"}},
		[][]byte{rig, params, pairs[0][0], pairs[0][1], pairs[1][0], pairs[1][1]}, 200)
	var res struct{ Series string }
	if err := json.Unmarshal(b, &res); err != nil || res.Series == "" {
		t.Fatalf("answer %s: %v", b, err)
	}
	stopA()

	bnode, stopB := node()
	defer stopB()
	post(bnode, "/v1/series/"+res.Series+"/frames?wait=true", [][3]string{{"left", "L2.png", "image/png"}, {"right", "R2.png", "image/png"}},
		[][]byte{pairs[2][0], pairs[2][1]}, 200)
	resp, err := http.Get(bnode.URL + "/v1/series/" + res.Series + "/curve.json")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	var cj struct {
		Frames []struct {
			State  string
			Gauges map[string]float64
		}
	}
	if err := json.NewDecoder(resp.Body).Decode(&cj); err != nil || len(cj.Frames) != 2 {
		t.Fatalf("curve.json: %v, %d frames; want 2", err, len(cj.Frames))
	}
	for k, fr := range cj.Frames {
		got, ok := fr.Gauges["ext_axial_eng"]
		if fr.State != "succeeded" || !ok || math.Abs(got-strains[k+1]) > 2e-4 {
			t.Errorf("frame %d on the NATS backend: %s, axial strain %.6f (given %v), imposed %.3f: want within 2e-4", k, fr.State, got, ok, strains[k+1])
		}
	}
}
