package service

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/series"
	"github.com/mottledic/mottle/pkg/series3d"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// maxStereoPairs bounds the pairs of one stereo series request.
const maxStereoPairs = 50

// stereoUpload is a parsed stereo request: the rig, the images of each
// named part in order, and the optional params and loads parts.
type stereoUpload struct {
	rig    *calib.RigFile
	img    map[string][]*imageio.Gray
	names  map[string][]string
	params series3d.Params
	loads  []byte
	// raw holds the bytes of the rig and of each image part given once
	// (a request without repeated parts), to be stored with a job; raws
	// the bytes of every image of each image part, in order.
	raw  map[string][]byte
	raws map[string][][]byte
}

// stereoRequest says what readStereo reads.
type stereoRequest struct {
	// images are the image parts, each given once unless repeat.
	images []string
	repeat bool
	// withLoads reads a "loads" part; noRig reads no "rig" and no
	// "params" part (a frame of a stored series, which has both).
	withLoads, noRig bool
	// parts describes the parts for problem documents.
	parts string
}

// readStereo reads a multipart stereo request: the image parts of q, plus
// "rig" and "params" (unless q.noRig) and "loads" (if q.withLoads).
func (s *Server) readStereo(w http.ResponseWriter, r *http.Request, q stereoRequest) (*stereoUpload, error) {
	images, repeat, withLoads, parts := q.images, q.repeat, q.withLoads, q.parts
	mt, _, err := mime.ParseMediaType(r.Header.Get("Content-Type"))
	if err != nil || mt != "multipart/form-data" {
		return nil, problem(http.StatusUnsupportedMediaType, "unsupported-media-type", "Unsupported media type",
			fmt.Sprintf("the body has Content-Type %q; send multipart/form-data with the parts %s", r.Header.Get("Content-Type"), parts),
			FieldProblem{"Content-Type", "use multipart/form-data"})
	}
	r.Body = http.MaxBytesReader(w, r.Body, s.cfg.MaxBodyBytes)
	mr, err := r.MultipartReader()
	if err != nil {
		return nil, problem(http.StatusBadRequest, "bad-multipart", "Malformed multipart body", err.Error())
	}
	u := &stereoUpload{img: map[string][]*imageio.Gray{}, names: map[string][]string{}, raw: map[string][]byte{}, raws: map[string][][]byte{}}
	isImage := map[string]bool{}
	for _, n := range images {
		isImage[n] = true
	}
	var rig, params []byte
	for {
		part, err := mr.NextPart()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, bodyErr(err, "body")
		}
		name := part.FormName()
		small := func(dst *[]byte) error { return readSmallPart(part, name, dst) }
		switch {
		case name == "rig" && !q.noRig:
			err = small(&rig)
		case name == "params" && !q.noRig:
			err = small(&params)
		case name == "loads" && withLoads:
			err = small(&u.loads)
		case isImage[name]:
			if len(u.img[name]) > 0 && !repeat {
				return nil, problem(http.StatusBadRequest, "duplicate-part", "Duplicate part", name+" given twice", FieldProblem{name, "give it once"})
			}
			if len(u.img[name]) == maxStereoPairs {
				return nil, problem(http.StatusRequestEntityTooLarge, "too-many-images", "Too many images",
					fmt.Sprintf("more than %d %s images; post a longer series in parts", maxStereoPairs, name), FieldProblem{name, "too many"})
			}
			if err := checkImageType(name, part.Header.Get("Content-Type")); err != nil {
				return nil, err
			}
			b, rerr := io.ReadAll(part)
			if rerr != nil {
				return nil, bodyErr(rerr, name)
			}
			field := name
			if repeat {
				field = fmt.Sprintf("%s[%d]", name, len(u.img[name]))
			}
			g, derr := s.decode(field, b)
			if derr != nil {
				return nil, derr
			}
			u.img[name] = append(u.img[name], g)
			u.raws[name] = append(u.raws[name], b)
			if !repeat {
				u.raw[name] = b
			}
			fn := part.FileName()
			if fn == "" {
				fn = field
			}
			u.names[name] = append(u.names[name], fn)
		default:
			return nil, problem(http.StatusBadRequest, "unknown-part", "Unknown part",
				fmt.Sprintf("the part %q is not one this endpoint reads; send %s", name, parts), FieldProblem{name, "unknown part"})
		}
		if err != nil {
			return nil, err
		}
		part.Close()
	}
	if q.noRig {
		return u, nil
	}
	if rig == nil {
		return nil, problem(http.StatusBadRequest, "missing-part", "Missing part", "the rig part is required",
			FieldProblem{"rig", "required: the rig file written by mottle calibrate --stereo"})
	}
	u.raw["rig"] = rig
	if u.rig, err = calib.ParseRig(rig); err != nil {
		return nil, problem(http.StatusUnprocessableEntity, "invalid-rig", "Invalid rig file", err.Error(), FieldProblem{"rig", err.Error()})
	}
	if params != nil {
		dec := json.NewDecoder(bytes.NewReader(params))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&u.params); err != nil {
			return nil, problem(http.StatusBadRequest, "bad-params", "Malformed parameters",
				fmt.Sprintf("params: %v; send a JSON object such as {\"subset\": 31, \"step\": 12, \"strain_window\": 5}", err),
				FieldProblem{"params", err.Error()})
		}
	}
	return u, nil
}

// checkStereoPair returns a problem when the images of a pair differ in
// size, or differ from the rig's size.
func checkStereoPair(rig *calib.Rig, l, r *imageio.Gray, lf, rf string) error {
	if l.W != r.W || l.H != r.H {
		return problem(http.StatusUnprocessableEntity, "pair-size-mismatch", "Left and right images differ in size",
			fmt.Sprintf("%s is %d×%d px but %s is %d×%d px: a stereo pair needs two images of the size the rig was calibrated on (%d×%d px)", lf, l.W, l.H, rf, r.W, r.H, rig.W, rig.H),
			FieldProblem{rf, fmt.Sprintf("give a %d×%d px image", rig.W, rig.H)})
	}
	if err := rig.Check(l.W, l.H, r.W, r.H); err != nil {
		return problem(http.StatusUnprocessableEntity, "rig-size-mismatch", "Rig calibrated for other images", err.Error(),
			FieldProblem{"rig", fmt.Sprintf("calibrated on %d×%d px images; the pair is %d×%d px", rig.W, rig.H, l.W, l.H)})
	}
	return nil
}

// stereoParams checks the params part against w×h images.
func stereoParams(p series3d.Params, w, h int) error {
	if err := p.Validate(w, h); err != nil {
		var fields []FieldProblem
		for _, line := range strings.Split(err.Error(), "\n") {
			fields = append(fields, FieldProblem{"params", line})
		}
		return problem(http.StatusUnprocessableEntity, "invalid-params", "Invalid parameters", "the params part has problems; see errors", fields...)
	}
	return nil
}

// postStereo handles POST /v1/stereo: a stereo measurement of one state,
// stored and computed as a job like a 2D analysis (kind "stereo", served
// under /v1/analyses/{id}: record, events, cancel, delete and the result
// files). Parts: "rig" (the rig file of mottle calibrate --stereo),
// "left_reference" and "right_reference", optionally "left_deformed" and
// "right_deformed" (both or neither: four images for a state), and an
// optional "params" JSON (subset, step, strain_window, prefilter_px,
// min_depth_mm, max_depth_mm, roi). It answers 202 with the job and its
// Location, or with ?wait=true the finished job with its field (the
// field.json of mottle stereo: shape, 3D displacement and surface strain
// in the specimen frame, mm). Bad input is answered at once with a
// problem document naming the part.
func (s *Server) postStereo(w http.ResponseWriter, r *http.Request) {
	if s.queueFull(w, r) {
		return
	}
	u, p, err := s.stereoState(w, r)
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	wait, err := boolQuery(r, "wait", false)
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return
	}
	formats, err := ParseFormats(r.URL.Query().Get("formats"))
	if err != nil {
		writeProblem(w, r, asProblem(err, "formats"))
		return
	}
	def := "shape"
	if p.Deformed {
		def = p.DeformedName
	}
	name, perr := nameQuery(r, "stereo: "+p.Reference+" → "+def)
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	raw := map[string][]byte{runner.StereoRig: u.raw["rig"]}
	decoded := map[string]*imageio.Gray{}
	for part, key := range map[string]string{"left_reference": runner.StereoLeftReference, "right_reference": runner.StereoRightReference,
		"left_deformed": runner.StereoLeftDeformed, "right_deformed": runner.StereoRightDeformed} {
		if b, ok := u.raw[part]; ok {
			raw[key], decoded[key] = b, u.img[part][0]
		}
	}
	params, _ := json.Marshal(p)
	l0 := u.img["left_reference"][0]
	proj, _ := chosenProject(r, caller(r.Context())) // checked by authenticate
	j := &jobs.Job{ID: newID(r), Kind: jobs.Stereo, State: jobs.Queued, Params: params, Name: name, Project: proj, Owner: caller(r.Context()).Name,
		Width: l0.W, Height: l0.H, Formats: formats.String(), Created: time.Now().UTC()}
	s.submitJob(w, r, j, raw, decoded, wait)
}

// stereoState reads and checks a POST /v1/stereo request.
func (s *Server) stereoState(w http.ResponseWriter, r *http.Request) (*stereoUpload, runner.StereoParams, error) {
	const parts = "rig (the rig file), left_reference and right_reference, optionally left_deformed and right_deformed (both), and an optional params part (JSON)"
	var sp runner.StereoParams
	imgs := []string{"left_reference", "right_reference", "left_deformed", "right_deformed"}
	u, err := s.readStereo(w, r, stereoRequest{images: imgs, parts: parts})
	if err != nil {
		return nil, sp, err
	}
	var missing []FieldProblem
	for _, n := range imgs[:2] {
		if len(u.img[n]) == 0 {
			missing = append(missing, FieldProblem{n, "required"})
		}
	}
	ld, rd := len(u.img["left_deformed"]) > 0, len(u.img["right_deformed"]) > 0
	if ld != rd {
		n := "right_deformed"
		if !ld {
			n = "left_deformed"
		}
		missing = append(missing, FieldProblem{n, "required with the other deformed image: a deformed state is a left and a right image taken together"})
	}
	if len(missing) > 0 {
		return nil, sp, problem(http.StatusBadRequest, "missing-part", "Missing part", "required parts are missing; see errors", missing...)
	}
	rig := u.rig.Rig()
	l0, r0 := u.img["left_reference"][0], u.img["right_reference"][0]
	if err := checkStereoPair(rig, l0, r0, "left_reference", "right_reference"); err != nil {
		return nil, sp, err
	}
	if ld {
		if err := checkStereoPair(rig, u.img["left_deformed"][0], u.img["right_deformed"][0], "left_deformed", "right_deformed"); err != nil {
			return nil, sp, err
		}
	}
	if err := stereoParams(u.params, l0.W, l0.H); err != nil {
		return nil, sp, err
	}
	sp = runner.StereoParams{Params: u.params, Deformed: ld, Reference: u.names["left_reference"][0]}
	if ld {
		sp.DeformedName = u.names["left_deformed"][0]
	}
	return u, sp, nil
}

// StereoSeriesResult is the answer of POST /v1/stereo/series?wait=true
// once every pair of the request is measured.
type StereoSeriesResult struct {
	// Series is the id of the stored series (/v1/series/{id}).
	Series string `json:"series"`
	// Points is the number of grid points; Matched those matched and
	// triangulated in the reference pair.
	Points  int `json:"points"`
	Matched int `json:"matched"`
	// Curve has one row per pair, the reference first, with the columns of
	// a 2D series (extensometer lengths in mm, measured in space).
	Curve series.Curve `json:"curve"`
	// Properties are the material properties of the curve.
	Properties series.Properties `json:"properties"`
	// Cautions apply to every value.
	Cautions []string `json:"cautions"`
}

// stereoCautions go with every stereo series result.
var stereoCautions = []string{
	"lengths are measured in space from the rig calibration, whose uncertainty adds to every value",
	"confirm critical strains and properties with a calibrated extensometer; design decisions follow the applicable codes and a licensed engineer",
}

// postStereoSeries handles POST /v1/stereo/series: it stores a stereo
// series (kind "stereo", served under /v1/series/{id} like a 2D series:
// record, frames, events, curve, properties, report, delete) and queues
// as its frames the pairs after the first. Parts: "rig", repeated "left"
// and "right" images (the k-th left and the k-th right taken together;
// the first pair is the reference, at least that one), an optional
// "params" JSON (series3d.Params: extensometers and gauges in left
// reference px, area_mm2, properties, the subset settings) and an optional
// "loads" CSV (the --table of mottle series, keyed by pair index). Later
// pairs are posted to /v1/series/{id}/frames with a left and a right part.
// It answers 201 with the series, or with ?wait=true, once every pair of
// the request is measured, 200 with a StereoSeriesResult.
func (s *Server) postStereoSeries(w http.ResponseWriter, r *http.Request) {
	if s.queueFull(w, r) {
		return
	}
	wait, err := boolQuery(r, "wait", false)
	if err != nil {
		writeProblem(w, r, err.(*Problem))
		return
	}
	formats, err := ParseFormats(r.URL.Query().Get("formats"))
	if err != nil {
		writeProblem(w, r, asProblem(err, "formats"))
		return
	}
	u, metas, err := s.stereoSeriesUpload(w, r)
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	n := len(u.img["left"])
	if n > 2 && s.ownerQueueFullN(w, r, n-1) {
		return
	}
	if free := s.queue.Cap() - s.queue.Len(); n-1 > free {
		retryAfter(w, s.retrySeconds())
		writeProblem(w, r, problem(http.StatusTooManyRequests, "queue-full", "Queue full",
			fmt.Sprintf("the request holds %d pairs after the reference but the queue has room for %d now; nothing was stored. Retry later, or create the series with fewer pairs and post the rest to its frames route", n-1, free)))
		return
	}
	refName := metas[0].Name
	label, perr := nameQuery(r, refName)
	if perr != nil {
		writeProblem(w, r, perr)
		return
	}
	params, _ := json.Marshal(u.params)
	l0 := u.img["left"][0]
	ctx := r.Context()
	now := time.Now().UTC()
	proj, _ := chosenProject(r, caller(ctx)) // checked by authenticate
	sr := &jobs.Series{ID: newID(r), Kind: jobs.Stereo, Name: label, Project: proj, Owner: caller(ctx).Name, Params: params, Width: l0.W, Height: l0.H,
		ReferenceName: refName, Formats: formats.String(), Created: now, Updated: now, Frames: []string{}}
	blobs := map[string][]byte{runner.StereoRig: u.raw["rig"], runner.StereoLeftReference: u.raws["left"][0], runner.StereoRightReference: u.raws["right"][0]}
	for name, b := range blobs {
		if err := s.blobs.Put(ctx, jobs.SeriesKey(sr.ID, name), bytes.NewReader(b)); err != nil {
			s.blobs.Delete(ctx, jobs.SeriesKey(sr.ID, ""))
			writeProblem(w, r, asProblem(err, name))
			return
		}
	}
	if err := s.store.CreateSeries(ctx, sr); err != nil {
		// A repeat under an Idempotency-Key that another instance
		// created meanwhile is answered by the key's replay; anything
		// else is an error.
		if !errors.Is(err, jobs.ErrExists) {
			s.blobs.Delete(ctx, jobs.SeriesKey(sr.ID, ""))
		}
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	s.recordSeries(ctx, jobs.AuditCreate, sr, fmt.Sprintf("stereo series with %d pairs", n))
	var frames []*jobs.Job
	for k := 1; k < n; k++ {
		in := map[string][]byte{runner.StereoLeftDeformed: u.raws["left"][k], runner.StereoRightDeformed: u.raws["right"][k]}
		m := metas[k]
		j, _, err := s.queueFrame(ctx, sr, jobs.NewID(), nil, in, m.Name, m.Time, m.Load)
		if err != nil {
			p := asProblem(err, fmt.Sprintf("left[%d]", k))
			p.Detail = fmt.Sprintf("series %s was stored with %d of its %d pairs; post pair %d and the rest to /v1/series/%s/frames (%s)", sr.ID, k, n, k, sr.ID, p.Detail)
			w.Header().Set("Location", "/v1/series/"+sr.ID)
			writeProblem(w, r, p)
			return
		}
		frames = append(frames, j)
	}
	created(r)
	logger(ctx).Info("stereo series created", "series", sr.ID, "width", sr.Width, "height", sr.Height, "frames", len(frames))
	w.Header().Set("Location", "/v1/series/"+sr.ID)
	if !wait || len(frames) == 0 {
		writeJSON(w, http.StatusCreated, s.viewSeries(ctx, sr, false))
		return
	}
	for _, j := range frames {
		done, err := s.await(w, r, j.ID)
		if err != nil || !done.State.Terminal() {
			writeJSON(w, http.StatusAccepted, s.viewSeries(ctx, sr, true))
			return
		}
		if done.State != jobs.Succeeded {
			p := problem(http.StatusUnprocessableEntity, "analysis-failed", "Stereo series frame "+string(done.State),
				fmt.Sprintf("frame %d (%s) of series %s ended %s", done.FrameIndex, done.Name, sr.ID, done.State))
			if done.Error != nil {
				p.Detail += ": " + done.Error.Title + ": " + done.Error.Detail
			}
			p.Job, p.State = done.ID, done.State
			writeProblem(w, r, p)
			return
		}
	}
	res, err := s.stereoSeriesResult(ctx, sr)
	if err != nil {
		writeProblem(w, r, asProblem(err, ""))
		return
	}
	writeJSON(w, http.StatusOK, res)
}

// stereoSeriesUpload reads and checks a POST /v1/stereo/series request:
// the pairs, the rig, the parameters and the loads table.
func (s *Server) stereoSeriesUpload(w http.ResponseWriter, r *http.Request) (*stereoUpload, []series.FrameMeta, error) {
	const parts = "rig (the rig file), left and right (one part per frame of each camera, in the same order, the reference pair first), an optional params part (JSON) and an optional loads part (CSV)"
	u, err := s.readStereo(w, r, stereoRequest{images: []string{"left", "right"}, repeat: true, withLoads: true, parts: parts})
	if err != nil {
		return nil, nil, err
	}
	nl, nr := len(u.img["left"]), len(u.img["right"])
	if nl != nr {
		return nil, nil, problem(http.StatusBadRequest, "unpaired-frames", "Frames not in pairs",
			fmt.Sprintf("%d left and %d right images: post one left and one right image per moment, in the same order", nl, nr),
			FieldProblem{"right", fmt.Sprintf("%d images for %d left images", nr, nl)})
	}
	if nl < 1 {
		return nil, nil, problem(http.StatusBadRequest, "missing-part", "Missing part",
			"no pair: a stereo series needs at least its reference pair", FieldProblem{"left", "give the reference pair: one left and one right image"})
	}
	rig := u.rig.Rig()
	for k := range nl {
		if err := checkStereoPair(rig, u.img["left"][k], u.img["right"][k], fmt.Sprintf("left[%d]", k), fmt.Sprintf("right[%d]", k)); err != nil {
			return nil, nil, err
		}
	}
	l0 := u.img["left"][0]
	if err := stereoParams(u.params, l0.W, l0.H); err != nil {
		return nil, nil, err
	}
	var tbl *series.Table
	if u.loads != nil {
		if tbl, err = series.ReadTable(bytes.NewReader(u.loads), "loads"); err != nil {
			return nil, nil, problem(http.StatusUnprocessableEntity, "invalid-loads", "Invalid loads table", err.Error(), FieldProblem{"loads", err.Error()})
		}
	}
	metas, err := series.FrameMetas(u.names["left"], series.TimeSource{}, tbl)
	if err != nil {
		return nil, nil, problem(http.StatusUnprocessableEntity, "invalid-loads", "Invalid loads table", err.Error(), FieldProblem{"loads", err.Error()})
	}
	return u, metas, nil
}

// readStereoFrame reads a frame of stereo series sr: a multipart body
// with one "left" and one "right" image of the series' size. It returns
// the stored inputs of the frame job and the left part's file name.
func (s *Server) readStereoFrame(w http.ResponseWriter, r *http.Request, sr *jobs.Series) (map[string][]byte, string, error) {
	const parts = "left and right (the frame's two images, taken together)"
	u, err := s.readStereo(w, r, stereoRequest{images: []string{"left", "right"}, noRig: true, parts: parts})
	if err != nil {
		return nil, "", err
	}
	var missing []FieldProblem
	for _, n := range []string{"left", "right"} {
		if len(u.img[n]) == 0 {
			missing = append(missing, FieldProblem{n, "required: a frame of a stereo series is a left and a right image taken together"})
		}
	}
	if len(missing) > 0 {
		return nil, "", problem(http.StatusBadRequest, "missing-part", "Missing part", "required parts are missing; see errors", missing...)
	}
	l, rt := u.img["left"][0], u.img["right"][0]
	if l.W != rt.W || l.H != rt.H {
		return nil, "", problem(http.StatusUnprocessableEntity, "pair-size-mismatch", "Left and right images differ in size",
			fmt.Sprintf("left is %d×%d px but right is %d×%d px: a stereo pair needs two images of the series' size (%d×%d px)", l.W, l.H, rt.W, rt.H, sr.Width, sr.Height),
			FieldProblem{"right", fmt.Sprintf("give a %d×%d px image", sr.Width, sr.Height)})
	}
	if l.W != sr.Width || l.H != sr.Height {
		return nil, "", problem(http.StatusUnprocessableEntity, "unusable-images", "Images cannot be correlated",
			fmt.Sprintf("the frame is %d×%d px but the series' reference pair is %d×%d px", l.W, l.H, sr.Width, sr.Height),
			FieldProblem{"left", "send frames from the same cameras at the same resolution and crop as the reference pair"})
	}
	fname := u.names["left"][0]
	if fname == "left" { // the part had no file name
		fname = ""
	}
	return map[string][]byte{runner.StereoLeftDeformed: u.raw["left"], runner.StereoRightDeformed: u.raw["right"]}, frameName(fname, ""), nil
}

// stereoSeriesCurve returns the curve of stereo series sr from the state
// after its last frame that succeeded (the reference alone has no row
// before its first frame: the reference pair is matched with it).
func (s *Server) stereoSeriesCurve(ctx context.Context, sr *jobs.Series) (series.Curve, *series3d.State, error) {
	p, err := runner.DecodeStereoSeriesParams(sr.Params)
	if err != nil {
		return series.Curve{}, nil, err
	}
	list, err := s.frames(ctx, sr)
	if err != nil {
		return series.Curve{}, nil, err
	}
	for i := len(list) - 1; i >= 0; i-- {
		j := list[i]
		if j.State != jobs.Succeeded {
			continue
		}
		b, err := s.readBlob(ctx, stateKey(sr.ID, j.FrameIndex))
		if err != nil {
			break
		}
		st, err := series3d.UnmarshalState(b)
		if err != nil {
			return series.Curve{}, nil, err
		}
		return series3d.CurveOf(p, st), &st, nil
	}
	return series3d.CurveOf(p, series3d.State{}), nil, nil
}

// stereoSeriesResult is the StereoSeriesResult of stereo series sr now.
func (s *Server) stereoSeriesResult(ctx context.Context, sr *jobs.Series) (*StereoSeriesResult, error) {
	c, st, err := s.stereoSeriesCurve(ctx, sr)
	if err != nil {
		return nil, err
	}
	res := &StereoSeriesResult{Series: sr.ID, Curve: c, Properties: c.Properties(), Cautions: stereoCautions}
	if st != nil {
		res.Points, res.Matched = st.Ref.Counts()
	}
	return res, nil
}
