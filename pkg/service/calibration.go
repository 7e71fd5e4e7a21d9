package service

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/calib"
)

// maxCalibrationImages bounds the images of one calibration request.
const maxCalibrationImages = 60

// CalibrationOptions are the optional "options" part of POST
// /v1/calibrations.
type CalibrationOptions struct {
	// Plane is the file name of the image whose target lay in the specimen
	// plane (see calib.File.Plane); "" for none.
	Plane string `json:"plane"`
	// FixK3 and FixTangential hold k3, or p1 and p2, at zero.
	FixK3         bool `json:"fix_k3"`
	FixTangential bool `json:"fix_tangential"`
	// MaxTiltDeg rejects views tilted more than this; 0 means 65°.
	MaxTiltDeg float64 `json:"max_tilt_deg"`
}

// postCalibration handles POST /v1/calibrations: multipart parts "target"
// (the geometry JSON of mottle target), "image" (one per view, repeated) and
// an optional "options" JSON; or a single "calibration" part holding a
// calibration file to check. It answers 200 with the calibration file
// (format mottle-camera/1). Nothing is stored.
func (s *Server) postCalibration(w http.ResponseWriter, r *http.Request) {
	select {
	case s.checking <- struct{}{}:
		defer func() { <-s.checking }()
	default:
		w.Header().Set("Retry-After", "1")
		writeProblem(w, r, problem(http.StatusTooManyRequests, "busy", "Too many requests being computed",
			fmt.Sprintf("%d image checks or calibrations are running, as many as the server has workers; retry in a second", cap(s.checking))))
		return
	}
	f, err := s.calibrate(w, r)
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	w.Header().Set("Cache-Control", "no-store")
	writeJSON(w, http.StatusOK, f)
}

func (s *Server) calibrate(w http.ResponseWriter, r *http.Request) (*calib.File, error) {
	parts := "target (JSON from mottle target), image (one part per view) and an optional options part (JSON), or one calibration part (a calibration file)"
	mt, _, err := mime.ParseMediaType(r.Header.Get("Content-Type"))
	if err != nil || mt != "multipart/form-data" {
		return nil, problem(http.StatusUnsupportedMediaType, "unsupported-media-type", "Unsupported media type",
			fmt.Sprintf("the body has Content-Type %q; send multipart/form-data with the parts %s, e.g. curl -F target=@board.json -F image=@cal01.png -F image=@cal02.png …", r.Header.Get("Content-Type"), parts),
			FieldProblem{"Content-Type", "use multipart/form-data"})
	}
	r.Body = http.MaxBytesReader(w, r.Body, s.cfg.MaxBodyBytes)
	mr, err := r.MultipartReader()
	if err != nil {
		return nil, problem(http.StatusBadRequest, "bad-multipart", "Malformed multipart body", err.Error())
	}
	var target, options, existing []byte
	var imgs []calib.Image
	seen := map[string]bool{}
	for {
		part, err := mr.NextPart()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, bodyErr(err, "body")
		}
		name := part.FormName()
		readJSON := func(dst *[]byte) error { return readSmallPart(part, name, dst) }
		switch name {
		case "target":
			err = readJSON(&target)
		case "options":
			err = readJSON(&options)
		case "calibration":
			err = readJSON(&existing)
		case "image":
			if len(imgs) == maxCalibrationImages {
				return nil, problem(http.StatusRequestEntityTooLarge, "too-many-images", "Too many images",
					fmt.Sprintf("more than %d images; 10–20 views are enough for a calibration", maxCalibrationImages), FieldProblem{"image", "too many"})
			}
			if err := checkImageType("image", part.Header.Get("Content-Type")); err != nil {
				return nil, err
			}
			fn := part.FileName()
			if fn == "" {
				fn = fmt.Sprintf("image %d", len(imgs)+1)
			}
			if seen[fn] {
				return nil, problem(http.StatusBadRequest, "duplicate-part", "Duplicate image", fmt.Sprintf("two images are named %q; give each view its own file name", fn),
					FieldProblem{"image", "duplicate file name " + fn})
			}
			seen[fn] = true
			b, rerr := io.ReadAll(part)
			if rerr != nil {
				return nil, bodyErr(rerr, "image")
			}
			g, derr := s.decode(fmt.Sprintf("image %s", fn), b)
			if derr != nil {
				return nil, derr
			}
			imgs = append(imgs, calib.Image{Name: fn, Gray: g})
		default:
			return nil, problem(http.StatusBadRequest, "unknown-part", "Unknown part",
				fmt.Sprintf("the part %q is not one this endpoint reads; send %s", name, parts), FieldProblem{name, "unknown part"})
		}
		if err != nil {
			return nil, err
		}
		part.Close()
	}
	if existing != nil {
		if target != nil || len(imgs) > 0 {
			return nil, problem(http.StatusBadRequest, "conflicting-parts", "Conflicting parts",
				"send either a calibration file (calibration) or target and images, not both", FieldProblem{"calibration", "alone"})
		}
		f, err := calib.Parse(existing)
		if err != nil {
			return nil, problem(http.StatusUnprocessableEntity, "invalid-calibration", "Invalid calibration file", err.Error(), FieldProblem{"calibration", err.Error()})
		}
		return f, nil
	}
	var missing []FieldProblem
	if target == nil {
		missing = append(missing, FieldProblem{"target", "required: the JSON file written by mottle target"})
	}
	if len(imgs) == 0 {
		missing = append(missing, FieldProblem{"image", "required: one part per view of the target (10–20 recommended)"})
	}
	if len(missing) > 0 {
		return nil, problem(http.StatusBadRequest, "missing-part", "Missing part", "required parts are missing; see errors", missing...)
	}
	t, err := calib.ParseTarget(target)
	if err != nil {
		return nil, problem(http.StatusUnprocessableEntity, "invalid-target", "Invalid target file", err.Error(), FieldProblem{"target", err.Error()})
	}
	var opt CalibrationOptions
	if options != nil {
		dec := json.NewDecoder(strings.NewReader(string(options)))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&opt); err != nil {
			return nil, problem(http.StatusBadRequest, "invalid-options", "Invalid options",
				fmt.Sprintf("options: %v; use {\"plane\": \"file name\", \"fix_k3\": false, \"fix_tangential\": false, \"max_tilt_deg\": 65}", err),
				FieldProblem{"options", err.Error()})
		}
	}
	res, rejected, err := calib.CalibrateImages(r.Context(), imgs, t, calib.DetectOptions{MaxTilt: opt.MaxTiltDeg},
		calib.Options{FixK3: opt.FixK3, FixTangential: opt.FixTangential})
	if err != nil {
		if r.Context().Err() != nil {
			return nil, problem(http.StatusRequestTimeout, "cancelled", "Request cancelled", err.Error())
		}
		var fields []FieldProblem
		for _, x := range rejected {
			fields = append(fields, FieldProblem{"image " + x.Image, string(x.Reason) + ": " + x.Detail})
		}
		return nil, problem(http.StatusUnprocessableEntity, "calibration-failed", "Calibration failed", err.Error(), fields...)
	}
	f := calib.NewFile(res, t, rejected, time.Now())
	if opt.Plane != "" {
		if err := f.SetPlane(opt.Plane); err != nil {
			return nil, problem(http.StatusUnprocessableEntity, "invalid-options", "Invalid plane view", err.Error(), FieldProblem{"options.plane", err.Error()})
		}
	}
	return f, nil
}
