package service_test

import (
	"bytes"
	"context"
	"math"
	"net/http"
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/series3d"
	"github.com/mottledic/mottle/pkg/service"
	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestStereoJob: POST /v1/stereo stores a job like a 2D analysis. A
// plane moved 1 mm toward the cameras (synth's exact stereo bench; the
// expected w = 1 mm is the imposed motion) posted with ?wait=true answers
// the finished job with its field; every result file read back through
// the download routes is byte for byte what runner.StereoField, the
// computation of the old synchronous answer, encodes for the same inputs
// (creation time aside). The Idempotency-Key replays the job; the job is
// listed under ?kind=stereo, in the audit trail, and answers 404 to a
// token of another project; a queued one is cancelled.
func TestStereoJob(t *testing.T) {
	const w, h = 320, 240
	l := newLab(t, func(c *service.Config) {
		c.Analyzer = service.Pipeline{} // the real maps of the stored field
		c.BeforeCompute = func(ctx context.Context, j jobs.Job) {
			if j.Name == "held" {
				<-ctx.Done()
			}
		}
	})
	rigB := stereoRig(t, w, h)
	rig := part{"rig", "rig.json", "application/json", rigB}
	ref := stereoPair(t, w, h, synth.Placement{Shape: synth.Plane{}}, 0, "left_reference", "right_reference")
	def := stereoPair(t, w, h, synth.Placement{Shape: synth.Plane{}, Pose: synth.Pose{T: [3]float64{0, 0, 1}}}, 2, "left_deformed", "right_deformed")
	params := part{"params", "", "application/json", []byte(`{"step": 12}`)}
	ct, body := multipartBody(t, append(append([]part{rig, params}, ref...), def...)...)
	key := map[string]string{"Idempotency-Key": "stereo-1", "X-Mottle-Project": "lab-a"}
	st, b := l.call(t, "rig", "POST", "/v1/stereo?wait=true&formats=all", key, ct, body)
	if st != 200 {
		t.Fatalf("POST /v1/stereo?wait=true: %d %s", st, b)
	}
	j := decodeJSON[jobDoc](t, b)
	loc := l.lastHdr.Get("Location")
	if j.State != "succeeded" || loc != "/v1/analyses/"+j.ID || len(j.Field) == 0 {
		t.Fatalf("job %s, state %s, Location %q, field %d bytes; want a succeeded job at /v1/analyses/%[1]s with its field", j.ID, j.State, loc, len(j.Field))
	}
	f, err := field.ReadJSON(bytes.NewReader(j.Field))
	if err != nil {
		t.Fatal(err)
	}
	if s, err := f.Summary("w"); err != nil || s.Count < 100 || math.Abs(s.Mean-1) > 0.01 {
		t.Errorf("w: %+v, %v: want 1 mm over 100+ points", s, err)
	}

	// The same computation in the test process.
	var im runner.StereoImages
	for k, dst := range []**imageio.Gray{&im.LeftRef, &im.RightRef, &im.LeftDef, &im.RightDef} {
		p := append(ref, def...)[k]
		if *dst, err = imageio.Decode(bytes.NewReader(p.data), imageio.Limits{}); err != nil {
			t.Fatal(err)
		}
	}
	rf, err := calib.ParseRig(rigB)
	if err != nil {
		t.Fatal(err)
	}
	sp := runner.StereoParams{Params: series3d.Params{Step: 12}, Deformed: true, Reference: ref[0].filename, DeformedName: def[0].filename}
	direct, err := runner.StereoField(testCtx(t), rf.Rig(), im, sp, 0)
	if err != nil {
		t.Fatal(err)
	}
	direct.Meta.Created = f.Meta.Created
	want, err := runner.EncodeFiles(direct, results.Set{results.JSON: true, results.CSV: true, results.VTS: true, results.NPZ: true})
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{"field.json", "field.csv", "field.vts", "field.npz"} {
		st, got := l.call(t, "display", "GET", loc+"/"+name, nil, "", nil)
		if st != 200 || !bytes.Equal(got, want[name]) {
			t.Errorf("GET %s: %d, %d bytes; want 200 and the %d bytes of the direct computation", name, st, len(got), len(want[name]))
		}
	}
	// The other routes of an analysis: an array, the map of w over the
	// left reference, the thumbnail and the left images.
	for _, p := range []string{"/arrays/w.npy", "/map.png?quantity=w", "/thumb.png", "/images/reference.png", "/images/deformed.png"} {
		if st, b := l.call(t, "display", "GET", loc+p, nil, "", nil); st != 200 {
			t.Errorf("GET %s: %d %.300s", p, st, b)
		}
	}

	// A repeat under the same key is the same job; lists and the trail.
	if st, b := l.call(t, "rig", "POST", "/v1/stereo?wait=true&formats=all", key, ct, body); st != 200 || decodeJSON[jobDoc](t, b).ID != j.ID {
		t.Errorf("repeat under the Idempotency-Key: %d, job %s; want 200 and job %s", st, decodeJSON[jobDoc](t, b).ID, j.ID)
	}
	if _, b := l.call(t, "lead", "GET", "/v1/analyses?kind=stereo", nil, "", nil); !strings.Contains(string(b), j.ID) {
		t.Errorf("GET /v1/analyses?kind=stereo does not list %s: %s", j.ID, b)
	}
	if _, b := l.call(t, "lead", "GET", "/v1/analyses", nil, "", nil); strings.Contains(string(b), j.ID) {
		t.Errorf("GET /v1/analyses (2D) lists the stereo job %s", j.ID)
	}
	if _, b := l.call(t, "lead", "GET", "/v1/audit", nil, "", nil); !strings.Contains(string(b), j.ID) {
		t.Errorf("the audit trail has no entry for %s: %s", j.ID, b)
	}

	// Another project's token.
	for _, p := range []string{loc, loc + "/field.json", loc + "/field.npz"} {
		if st, b := l.call(t, "lead-b", "GET", p, nil, "", nil); st != http.StatusNotFound {
			t.Errorf("lead-b GET %s: %d %s; want 404", p, st, b)
		}
	}
	if st, b := l.call(t, "lead-b", "POST", loc+"/cancel", nil, "", nil); st != http.StatusNotFound {
		t.Errorf("lead-b cancels: %d %s; want 404", st, b)
	}

	// A job held before computing is cancelled.
	ct, body = multipartBody(t, append([]part{rig, params}, ref...)...)
	st, b = l.call(t, "rig", "POST", "/v1/stereo?name=held", map[string]string{"X-Mottle-Project": "lab-a"}, ct, body)
	if st != http.StatusAccepted {
		t.Fatalf("POST /v1/stereo: %d %s; want 202", st, b)
	}
	held := "/v1/analyses/" + decodeJSON[jobDoc](t, b).ID
	if st, b := l.call(t, "rig", "POST", held+"/cancel", nil, "", nil); st != http.StatusAccepted {
		t.Fatalf("cancel: %d %s", st, b)
	}
	var state string
	poll(t, held+" to finish", func() bool {
		_, b := l.call(t, "rig", "GET", held, nil, "", nil)
		state = decodeJSON[jobDoc](t, b).State
		return state == "succeeded" || state == "failed" || state == "canceled"
	})
	if state != "canceled" {
		t.Errorf("held job: %s, want canceled", state)
	}
}
