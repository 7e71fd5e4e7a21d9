package service

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"mime"
	"mime/multipart"
	"net/http"
	"slices"
	"strings"
	"sync"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/calib"
	"github.com/mottledic/mottle/pkg/imageio"
)

// maxParamsBytes limits the params part.
const maxParamsBytes = 1 << 20

// maxCalibrationBytes limits the calibration part.
const maxCalibrationBytes = 8 << 20

// upload is a parsed multipart submission.
type upload struct {
	raw    map[string][]byte        // encoded images by part name
	files  map[string]string        // file names of the parts that gave one
	img    map[string]*imageio.Gray // decoded images by part name
	params []byte                   // the params part, nil without one
	// calibration is the optional "calibration" part (a mottle-camera/1
	// file) and calName its file name.
	calibration []byte
	calName     string
}

// imageTypes are the media types accepted for images. An empty type or
// application/octet-stream leaves the format to the decoder's sniffing.
var imageTypes = map[string]bool{
	"image/png": true, "image/tiff": true, "image/tif": true, "image/jpeg": true, "image/jpg": true,
	"image/bmp": true, "image/x-ms-bmp": true, "image/x-bmp": true, "image/x-portable-graymap": true,
	"application/octet-stream": true, "": true,
}

func checkImageType(field, ct string) error {
	mt := ""
	if ct != "" {
		var err error
		if mt, _, err = mime.ParseMediaType(ct); err != nil {
			mt = ct
		}
	}
	if !imageTypes[strings.ToLower(mt)] {
		return problem(http.StatusUnsupportedMediaType, "unsupported-media-type", "Unsupported media type",
			fmt.Sprintf("%s has Content-Type %q; send image/png, image/tiff, image/jpeg, image/bmp, image/x-portable-graymap or application/octet-stream", field, ct),
			FieldProblem{field, fmt.Sprintf("Content-Type %q is not an image type", ct)})
	}
	return nil
}

// readMultipart reads a multipart/form-data body with the image parts
// images (required unless listed in optional) and an optional "params"
// part, decoding every image with the pixel limit checked from its header.
func (s *Server) readMultipart(w http.ResponseWriter, r *http.Request, images []string, optional ...string) (_ *upload, rerr error) {
	defer func() {
		if rerr != nil {
			rerr = slowErr(r, rerr)
		}
	}()
	mt, _, err := mime.ParseMediaType(r.Header.Get("Content-Type"))
	if err != nil || mt != "multipart/form-data" {
		return nil, problem(http.StatusUnsupportedMediaType, "unsupported-media-type", "Unsupported media type",
			fmt.Sprintf("the body has Content-Type %q; send multipart/form-data with the parts %s and an optional params part (JSON), e.g. curl -F %s=@ref.png",
				r.Header.Get("Content-Type"), strings.Join(append(images, optional...), ", "), images[0]),
			FieldProblem{"Content-Type", "use multipart/form-data"})
	}
	r.Body = http.MaxBytesReader(w, r.Body, s.cfg.MaxBodyBytes)
	mr, err := r.MultipartReader()
	if err != nil {
		return nil, problem(http.StatusBadRequest, "bad-multipart", "Malformed multipart body", err.Error())
	}
	want := map[string]bool{}
	for _, n := range images {
		want[n] = true
	}
	for _, n := range optional {
		want[n] = true
	}
	u := &upload{raw: map[string][]byte{}, img: map[string]*imageio.Gray{}, files: map[string]string{}}
	for {
		part, err := mr.NextPart()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, bodyErr(err, "body")
		}
		name := part.FormName()
		switch {
		case name == "params":
			if err := readPart(part, name, maxParamsBytes, "Parameters too large", &u.params); err != nil {
				return nil, err
			}
		case name == "calibration":
			if err := readPart(part, name, maxCalibrationBytes, "Calibration too large", &u.calibration); err != nil {
				return nil, err
			}
			u.calName = part.FileName()
		case want[name]:
			if _, dup := u.raw[name]; dup {
				return nil, problem(http.StatusBadRequest, "duplicate-part", "Duplicate part", name+" given twice", FieldProblem{name, "give it once"})
			}
			if err := checkImageType(name, part.Header.Get("Content-Type")); err != nil {
				return nil, err
			}
			b, err := io.ReadAll(part)
			if err != nil {
				return nil, bodyErr(err, name)
			}
			u.raw[name] = b
			if fn := part.FileName(); fn != "" {
				u.files[name] = fn
			}
		default:
			return nil, problem(http.StatusBadRequest, "unknown-part", "Unknown part",
				fmt.Sprintf("the part %q is not one this endpoint reads; send %s, params and optionally calibration", name, strings.Join(append(images, optional...), ", ")),
				FieldProblem{name, "unknown part"})
		}
		part.Close()
	}
	var missing []FieldProblem
	for _, n := range images {
		if _, ok := u.raw[n]; !ok {
			missing = append(missing, FieldProblem{n, "required image part is missing"})
		}
	}
	if len(missing) > 0 {
		return nil, problem(http.StatusBadRequest, "missing-part", "Missing part", "required parts are missing; see errors", missing...)
	}
	if err := s.admitDecode(r, u.raw); err != nil {
		return nil, s.memoryErr(w, err)
	}
	// The images are decoded at the same time (their memory was admitted
	// together); the first failing one in the order of the parts' names
	// is the error.
	var names []string
	for _, n := range slices.Concat(images, optional) {
		if _, ok := u.raw[n]; ok {
			names = append(names, n)
		}
	}
	imgs := make([]*imageio.Gray, len(names))
	errs := make([]error, len(names))
	var wg sync.WaitGroup
	for i, name := range names {
		wg.Go(func() { imgs[i], errs[i] = s.decode(name, u.raw[name]) })
	}
	wg.Wait()
	for i, name := range names {
		if errs[i] != nil {
			return nil, errs[i]
		}
		u.img[name] = imgs[i]
	}
	return u, nil
}

// decode decodes an uploaded image; errors are problems naming field.
func (s *Server) decode(field string, b []byte) (*imageio.Gray, error) {
	g, err := imageio.Decode(bytes.NewReader(b), s.limits())
	if err != nil {
		p := asProblem(err, field)
		p.Detail = field + ": " + p.Detail
		return nil, p
	}
	return upright(field, g, g.Orientation)
}

func bodyErr(err error, field string) error {
	if errors.Is(err, errTooSlow) {
		return slowProblem(err, field)
	}
	var mbe *http.MaxBytesError
	if errors.As(err, &mbe) {
		return asProblem(err, field)
	}
	return problem(http.StatusBadRequest, "bad-body", "Unreadable body", fmt.Sprintf("%s: %v", field, err), FieldProblem{field, "could not be read"})
}

// checkParams parses the params JSON over the defaults and checks it
// against an image of w×h pixels and the server's limits.
func (s *Server) checkParams(raw []byte, w, h int) (analysis.Params, error) {
	p, err := analysis.ParseJSONBytes(raw)
	if err != nil {
		var ve *analysis.ValidationError
		if errors.As(err, &ve) {
			return p, err
		}
		return p, problem(http.StatusBadRequest, "bad-params", "Malformed parameters", err.Error(),
			FieldProblem{"params", "send a JSON object such as {\"subset\": 31, \"step\": 8}"})
	}
	if err := p.Validate(w, h); err != nil {
		return p, err
	}
	return p, s.checkPoints(p, w, h)
}

// checkPoints checks the number of grid points p gives on a w×h image
// against the server limit.
func (s *Server) checkPoints(p analysis.Params, w, h int) error {
	if p.Step > 0 {
		if n := (w/p.Step + 1) * (h/p.Step + 1); n > s.cfg.MaxPoints {
			return &analysis.ValidationError{Problems: []analysis.Problem{{Field: "step",
				Message: fmt.Sprintf("is %d px, giving about %d grid points on the %d×%d image, over the server limit of %d; use a larger step or a smaller ROI", p.Step, n, w, h, s.cfg.MaxPoints)}}}
		}
	}
	return nil
}

// withCalibration returns the params JSON with the calibration part of u
// merged in (as "calibration", compacted, and "calibration_name"), or
// params unchanged without one. Errors are problems naming the part.
func withCalibration(params []byte, u *upload) ([]byte, error) {
	if u.calibration == nil {
		return params, nil
	}
	f, err := calib.Parse(u.calibration)
	if err != nil {
		return nil, problem(http.StatusUnprocessableEntity, "invalid-calibration", "Invalid calibration file", "calibration: "+err.Error(),
			FieldProblem{"calibration", err.Error() + "; send the file written by mottle calibrate or POST /v1/calibrations"})
	}
	m := map[string]json.RawMessage{}
	if len(bytes.TrimSpace(params)) > 0 {
		if err := json.Unmarshal(params, &m); err != nil {
			return nil, problem(http.StatusBadRequest, "bad-params", "Malformed parameters", "parameters are not a JSON object: "+err.Error(),
				FieldProblem{"params", "send a JSON object"})
		}
	}
	if _, dup := m["calibration"]; dup {
		return nil, problem(http.StatusBadRequest, "duplicate-part", "Calibration given twice",
			"the calibration is both a part and a parameter; give it once", FieldProblem{"calibration", "give it once"})
	}
	name := u.calName
	if name == "" {
		name = "calibration"
	}
	cb, err := json.Marshal(f.Compact())
	if err != nil {
		return nil, fmt.Errorf("calibration: %w", err)
	}
	nb, _ := json.Marshal(name)
	m["calibration"], m["calibration_name"] = cb, nb
	return json.Marshal(m)
}

// readSmallPart reads the multipart part name (a JSON document: rig,
// target, options…) into *dst, refusing a second part of that name and one
// of more than maxParamsBytes with problem documents naming it.
func readSmallPart(part *multipart.Part, name string, dst *[]byte) error {
	return readPart(part, name, maxParamsBytes, "Part too large", dst)
}

// readPart reads the multipart part name into *dst (never nil after
// it), refusing a second part of that name (*dst already set) and one of
// more than limit bytes (413, with title) with problem documents naming
// it.
func readPart(part *multipart.Part, name string, limit int64, title string, dst *[]byte) error {
	if *dst != nil {
		return problem(http.StatusBadRequest, "duplicate-part", "Duplicate part", name+" given twice", FieldProblem{name, "give it once"})
	}
	b, err := io.ReadAll(io.LimitReader(part, limit+1))
	if err != nil {
		return bodyErr(err, name)
	}
	if int64(len(b)) > limit {
		return problem(http.StatusRequestEntityTooLarge, "params-too-large", title,
			fmt.Sprintf("the %s part exceeds %d bytes", name, limit), FieldProblem{name, "too large"})
	}
	*dst = b
	return nil
}
