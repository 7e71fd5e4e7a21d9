package service

import (
	"bytes"
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
	// (a request without repeated parts), to be stored with a job.
	raw map[string][]byte
}

// readStereo reads a multipart stereo request whose image parts are
// images (each given once unless repeat), plus "rig", "params" and, when
// withLoads, "loads".
func (s *Server) readStereo(w http.ResponseWriter, r *http.Request, images []string, repeat, withLoads bool, parts string) (*stereoUpload, error) {
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
	u := &stereoUpload{img: map[string][]*imageio.Gray{}, names: map[string][]string{}, raw: map[string][]byte{}}
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
		case name == "rig":
			err = small(&rig)
		case name == "params":
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

// stereoBusy takes a computing slot, or answers 429 and returns false.
func (s *Server) stereoBusy(w http.ResponseWriter, r *http.Request) (release func(), ok bool) {
	select {
	case s.checking <- struct{}{}:
		return func() { <-s.checking }, true
	default:
		w.Header().Set("Retry-After", "1")
		writeProblem(w, r, problem(http.StatusTooManyRequests, "busy", "Too many requests being computed",
			fmt.Sprintf("%d image checks, calibrations or stereo measurements are running, as many as the server has workers; retry in a second", cap(s.checking))))
		return nil, false
	}
}

// computeFailed turns an error of the computation into a problem.
func computeFailed(r *http.Request, err error, what string) *Problem {
	if r.Context().Err() != nil {
		return problem(http.StatusRequestTimeout, "cancelled", "Request cancelled", err.Error())
	}
	var p *Problem
	if errors.As(err, &p) {
		return p
	}
	return problem(http.StatusUnprocessableEntity, "stereo-failed", what+" failed", err.Error())
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
	u, err := s.readStereo(w, r, imgs, false, false, parts)
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

// StereoSeriesResult is the answer of POST /v1/stereo/series.
type StereoSeriesResult struct {
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

// postStereoSeries handles POST /v1/stereo/series: a whole stereo series
// measured in the request. Parts: "rig", repeated "left" and "right"
// images (the k-th left and the k-th right taken together; the first pair
// is the reference), an optional "params" JSON (series3d.Params:
// extensometers and gauges in left reference px, area_mm2, properties, the
// subset settings) and an optional "loads" CSV (the --table of mottle
// series, keyed by frame index). It answers 200 with a
// StereoSeriesResult. Nothing is stored.
func (s *Server) postStereoSeries(w http.ResponseWriter, r *http.Request) {
	release, ok := s.stereoBusy(w, r)
	if !ok {
		return
	}
	defer release()
	res, err := s.stereoSeries(w, r)
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	w.Header().Set("Cache-Control", "no-store")
	writeJSON(w, http.StatusOK, res)
}

func (s *Server) stereoSeries(w http.ResponseWriter, r *http.Request) (*StereoSeriesResult, error) {
	const parts = "rig (the rig file), left and right (one part per frame of each camera, in the same order, the reference pair first), an optional params part (JSON) and an optional loads part (CSV)"
	u, err := s.readStereo(w, r, []string{"left", "right"}, true, true, parts)
	if err != nil {
		return nil, err
	}
	nl, nr := len(u.img["left"]), len(u.img["right"])
	if nl != nr {
		return nil, problem(http.StatusBadRequest, "unpaired-frames", "Frames not in pairs",
			fmt.Sprintf("%d left and %d right images: post one left and one right image per moment, in the same order", nl, nr),
			FieldProblem{"right", fmt.Sprintf("%d images for %d left images", nr, nl)})
	}
	if nl < 2 {
		return nil, problem(http.StatusBadRequest, "missing-part", "Missing part",
			fmt.Sprintf("%d pair: a series needs the reference pair and at least one more", nl), FieldProblem{"left", "give at least two left and two right images"})
	}
	rig := u.rig.Rig()
	for k := range nl {
		if err := checkStereoPair(rig, u.img["left"][k], u.img["right"][k], fmt.Sprintf("left[%d]", k), fmt.Sprintf("right[%d]", k)); err != nil {
			return nil, err
		}
	}
	l0, r0 := u.img["left"][0], u.img["right"][0]
	if err := stereoParams(u.params, l0.W, l0.H); err != nil {
		return nil, err
	}
	var tbl *series.Table
	if u.loads != nil {
		if tbl, err = series.ReadTable(bytes.NewReader(u.loads), "loads"); err != nil {
			return nil, problem(http.StatusUnprocessableEntity, "invalid-loads", "Invalid loads table", err.Error(), FieldProblem{"loads", err.Error()})
		}
	}
	metas, err := series.FrameMetas(u.names["left"], series.TimeSource{}, tbl)
	if err != nil {
		return nil, problem(http.StatusUnprocessableEntity, "invalid-loads", "Invalid loads table", err.Error(), FieldProblem{"loads", err.Error()})
	}
	ctx := r.Context()
	sr, err := series3d.New(ctx, rig, l0, r0, metas[0], u.params)
	if err != nil {
		return nil, computeFailed(r, err, "Stereo matching")
	}
	for k := 1; k < nl; k++ {
		if _, _, err := sr.Add(ctx, u.img["left"][k], u.img["right"][k], metas[k]); err != nil {
			return nil, computeFailed(r, err, "Stereo tracking")
		}
	}
	ref := sr.Reference()
	return &StereoSeriesResult{Points: len(ref.Points), Matched: ref.OK(), Curve: sr.Curve(), Properties: sr.Properties(),
		Cautions: []string{
			"lengths are measured in space from the rig calibration, whose uncertainty adds to every value",
			"confirm critical strains and properties with a calibrated extensometer; design decisions follow the applicable codes and a licensed engineer",
		}}, nil
}
