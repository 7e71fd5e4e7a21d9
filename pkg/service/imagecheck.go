package service

import (
	"bytes"
	"context"
	"encoding/base64"
	"errors"
	"fmt"
	"image"
	"image/draw"
	"image/png"
	"math"
	"mime"
	"net/http"
	"strconv"
	"strings"

	"github.com/disintegration/imaging"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
)

// ImageCheck is the answer of POST /v1/images/check: what the server
// reads from one image, for a client that cannot decode the file itself
// (TIFF, 16-bit PNG).
type ImageCheck struct {
	// Width and Height are the image size in px.
	Width  int `json:"width"`
	Height int `json:"height"`
	// Bits is the sample depth as decoded: 8 or 16 (a 12-bit camera image
	// in a 16-bit container reads as 16, with levels 0–4095).
	Bits int `json:"bits"`
	// Grey holds the grey-level statistics over every pixel, in the
	// image's native scale.
	Grey GreyStats `json:"grey"`
	// SpeckleSizePx is the autocorrelation speckle size in px
	// (imageio.SpeckleSize), or nil when it cannot be measured; then
	// SpeckleError says why.
	SpeckleSizePx *float64 `json:"speckle_size_px"`
	// SpeckleError explains a missing speckle size.
	SpeckleError string `json:"speckle_error,omitempty"`
	// Advice is the subset and step suggested for the speckle size, or
	// nil without one.
	Advice *Advice `json:"advice,omitempty"`
	// Quality holds the image quality measures and the warnings, each with
	// what to change at the bench (package quality).
	Quality *quality.Report `json:"quality,omitempty"`
	// Recommendation is the subset that meets the target displacement
	// uncertainty (query target_std, default 0.01 px) at 95 % of the points,
	// with the predicted noise and the virtual strain gauge (package
	// quality), or nil when it cannot be computed; then RecommendationError
	// says why.
	Recommendation      *quality.Recommendation `json:"recommendation,omitempty"`
	RecommendationError string                  `json:"recommendation_error,omitempty"`
	// PreviewPNG is a data URL of an 8-bit grey PNG of the whole image,
	// its grey range stretched from min → 0 to max → 255, at full size up
	// to PreviewMaxPx on the long side and reduced to fit it beyond (see
	// preview). It is a display copy: analyses read the file itself.
	PreviewPNG string `json:"preview_png"`
	// PreviewWidth and PreviewHeight are the preview's size in px.
	PreviewWidth  int `json:"preview_width"`
	PreviewHeight int `json:"preview_height"`
}

// PreviewMaxPx bounds the long side of the image check's preview: a
// 64-megapixel frame becomes a PNG of at most 1600 px a side that any
// browser decodes at once, instead of a full-size data URL of tens of MB.
const PreviewMaxPx = 1600

// GreyStats are grey-level statistics of an image; Std is the population
// standard deviation.
type GreyStats struct {
	Mean float64 `json:"mean"`
	Std  float64 `json:"std"`
	Min  float64 `json:"min"`
	Max  float64 `json:"max"`
}

// Advice is the parameter advice that follows from a speckle size s: at
// least 3 speckles across a subset (iDICs, "A Good Practices Guide for
// Digital Image Correlation", Jones & Iadicola (eds.), 2018; from memory),
// counting the gaps between speckles of about equal dark and light area a
// pitch of about 2 s (common practice), and a step of a third to a half of
// the subset (common practice). It follows the browser page's advice in
// web/static/js/speckle.js.
type Advice struct {
	// MinSubsetPx is the smallest odd subset that holds 3 speckles across:
	// 3 s rounded up to odd.
	MinSubsetPx int `json:"min_subset_px"`
	// SubsetPx is the suggested subset: 3 speckle pitches, 6 s rounded up
	// to odd.
	SubsetPx int `json:"subset_px"`
	// StepMinPx and StepMaxPx bound the suggested step for SubsetPx: a
	// third and a half of it, rounded.
	StepMinPx int `json:"step_min_px"`
	StepMaxPx int `json:"step_max_px"`
}

// advise returns the advice for speckle size s px; subsets are kept within
// the analysis limits (odd, 7 … analysis.MaxSubset).
func advise(s float64) *Advice {
	odd := func(v float64) int {
		n := int(math.Ceil(v))
		if n%2 == 0 {
			n++
		}
		return min(max(n, 7), analysis.MaxSubset)
	}
	a := &Advice{MinSubsetPx: odd(3 * s), SubsetPx: odd(6 * s)}
	a.StepMinPx = max(1, int(math.Round(float64(a.SubsetPx)/3)))
	a.StepMaxPx = max(1, int(math.Round(float64(a.SubsetPx)/2)))
	return a
}

// checkImage answers POST /v1/images/check: the raw body is one image,
// under the same body and pixel limits as uploads.
func (s *Server) checkImage(w http.ResponseWriter, r *http.Request) {
	select {
	case s.checking <- struct{}{}:
		defer func() { <-s.checking }()
	default:
		w.Header().Set("Retry-After", "1")
		writeProblem(w, r, problem(http.StatusTooManyRequests, "busy", "Too many image checks",
			fmt.Sprintf("%d image checks are running, as many as the server has workers; retry in a second", cap(s.checking))))
		return
	}
	_, g, err := s.readRawImage(w, r, "the image")
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	q, prob := checkQuery(r)
	if prob != nil {
		writeProblem(w, r, prob)
		return
	}
	res, err := measureImage(g)
	if err == nil {
		err = checkQuality(r.Context(), res, g, q)
	}
	if err != nil {
		writeProblem(w, r, asProblem(err, "body"))
		return
	}
	w.Header().Set("Cache-Control", "no-store")
	writeJSON(w, http.StatusOK, res)
}

// measureImage measures g and renders its stretched preview.
func measureImage(g *imageio.Gray) (*ImageCheck, error) {
	mean, std, lo, hi := imageio.Stats(g)
	res := &ImageCheck{Width: g.W, Height: g.H, Bits: g.Bits, Grey: GreyStats{mean, std, lo, hi}}
	if sz, err := imageio.SpeckleSize(g); err != nil {
		res.SpeckleError = err.Error()
	} else {
		res.SpeckleSizePx = &sz
		res.Advice = advise(sz)
	}
	b, w, h, err := PreviewPNG(g, lo, hi)
	if err != nil {
		return nil, err
	}
	res.PreviewPNG = "data:image/png;base64," + base64.StdEncoding.EncodeToString(b)
	res.PreviewWidth, res.PreviewHeight = w, h
	return res, nil
}

// PreviewPNG encodes the image check's display copy of g (see preview)
// as an 8-bit grey PNG, with g's grey range lo…hi stretched to 0…255 and
// the long side at most PreviewMaxPx; it returns the PNG and its size.
func PreviewPNG(g *imageio.Gray, lo, hi float64) ([]byte, int, int, error) {
	p := preview(g, lo, hi, PreviewMaxPx)
	var buf bytes.Buffer
	if err := (&png.Encoder{CompressionLevel: png.BestSpeed}).Encode(&buf, p); err != nil {
		return nil, 0, 0, fmt.Errorf("encode the preview of the %d×%d px image: %w", g.W, g.H, err)
	}
	return buf.Bytes(), p.Rect.Dx(), p.Rect.Dy(), nil
}

// preview returns the 8-bit display copy of g, its grey range lo…hi
// stretched to 0…255, reduced with imaging's box filter (each preview
// pixel the mean of the image pixels it covers, so speckle does not
// alias into false texture) when the long side exceeds maxPx. Only the
// display uses it; nothing measured is resampled.
func preview(g *imageio.Gray, lo, hi float64, maxPx int) *image.Gray {
	m := image.NewGray(image.Rect(0, 0, g.W, g.H))
	scale := 0.0
	if hi > lo {
		scale = 255 / (hi - lo)
	}
	for y := 0; y < g.H; y++ {
		src, dst := g.Pix[y*g.Stride:y*g.Stride+g.W], m.Pix[y*m.Stride:y*m.Stride+g.W]
		for x, v := range src {
			dst[x] = uint8(min(255, max(0, math.Round((float64(v)-lo)*scale))))
		}
	}
	if max(g.W, g.H) <= maxPx {
		return m
	}
	t := imaging.Fit(m, maxPx, maxPx, imaging.Box)
	out := image.NewGray(t.Bounds())
	draw.Draw(out, out.Rect, t, t.Bounds().Min, draw.Src) // imaging answers NRGBA; the preview stays one channel
	return out
}

// stretched returns g with its grey range lo…hi mapped to 0…255, so that
// 12- and 16-bit images with a narrow range are visible in an 8-bit
// preview; a flat image is black.
func stretched(g *imageio.Gray, lo, hi float64) *imageio.Gray {
	p := imageio.NewGray(g.W, g.H)
	scale := 0.0
	if hi > lo {
		scale = 255 / (hi - lo)
	}
	for y := 0; y < g.H; y++ {
		src, dst := g.Pix[y*g.Stride:y*g.Stride+g.W], p.Pix[y*p.Stride:y*p.Stride+g.W]
		for x, v := range src {
			dst[x] = float32((float64(v) - lo) * scale)
		}
	}
	p.Bits = 8
	return p
}

// readRawImage reads a request whose raw body is one image file (not
// multipart), checking its Content-Type, the body limit and, from the
// image header before decoding, the pixel limit. what names the body in
// the messages ("the frame", "the image"). Errors are problems.
func (s *Server) readRawImage(w http.ResponseWriter, r *http.Request, what string) ([]byte, *imageio.Gray, error) {
	body, err := s.readRawBody(w, r, what)
	if err != nil {
		return nil, nil, err
	}
	if err := s.admitDecode(r, map[string][]byte{"body": body}); err != nil {
		return nil, nil, s.memoryErr(w, err)
	}
	g, err := s.decode("body", body)
	if err != nil {
		return nil, nil, err
	}
	return body, g, nil
}

// readRawBody is readRawImage without the decode: the Content-Type and
// the body limit.
func (s *Server) readRawBody(w http.ResponseWriter, r *http.Request, what string) ([]byte, error) {
	ct := r.Header.Get("Content-Type")
	if mt, _, _ := mime.ParseMediaType(ct); ct == "" || strings.HasPrefix(mt, "multipart/") {
		return nil, problem(http.StatusUnsupportedMediaType, "unsupported-media-type", "Unsupported media type",
			fmt.Sprintf("%s has Content-Type %q; send the image file as the raw body with its type, e.g. curl --data-binary @frame.tif -H 'Content-Type: image/tiff'", what, ct),
			FieldProblem{"Content-Type", "use image/png, image/tiff, image/jpeg, image/bmp or application/octet-stream"})
	}
	if err := checkImageType("body", ct); err != nil {
		return nil, err
	}
	body, err := readAllLimited(w, r, s.cfg.MaxBodyBytes)
	if err != nil {
		return nil, asProblem(bodyErr(err, "body"), "body")
	}
	return body, nil
}

// readAllLimited reads the whole request body, at most limit bytes.
func readAllLimited(w http.ResponseWriter, r *http.Request, limit int64) ([]byte, error) {
	var buf bytes.Buffer
	if r.ContentLength > 0 && r.ContentLength <= limit {
		buf.Grow(int(r.ContentLength))
	}
	_, err := buf.ReadFrom(http.MaxBytesReader(w, r.Body, limit))
	return buf.Bytes(), err
}

// checkParams are the query parameters of the image check: the target
// displacement std (px), the noise σ (0 = estimate from the image), the
// step (0 = a third of the subset) and the strain window of the VSG.
type checkParams struct {
	target, noise float64
	step, window  int
}

// checkQuery reads target_std, noise_sigma, step and strain_window; a
// bad value is a 400 problem naming the parameter.
func checkQuery(r *http.Request) (checkParams, *Problem) {
	q := checkParams{target: 0.01, window: analysis.Defaults().StrainWindow}
	var fields []FieldProblem
	num := func(name string, dst *float64, ok func(float64) bool, want string) {
		if v := r.URL.Query().Get(name); v != "" {
			f, err := strconv.ParseFloat(v, 64)
			if err != nil || !ok(f) {
				fields = append(fields, FieldProblem{name, fmt.Sprintf("%q: want %s", v, want)})
				return
			}
			*dst = f
		}
	}
	var step, window float64 = 0, float64(q.window)
	num("target_std", &q.target, func(f float64) bool { return f > 0 && f < 10 }, "a displacement std in px, e.g. 0.01")
	num("noise_sigma", &q.noise, func(f float64) bool { return f >= 0 && f < 1e6 }, "the noise σ in grey levels (0 = estimate from the image)")
	num("step", &step, func(f float64) bool { return f >= 0 && f <= 1000 && f == math.Trunc(f) }, "a whole number of px, 0 = a third of the subset")
	num("strain_window", &window, func(f float64) bool {
		return f >= 1 && f <= analysis.MaxStrainWindow && f == math.Trunc(f) && int(f)%2 == 1
	}, fmt.Sprintf("an odd number of grid points from 1 to %d", analysis.MaxStrainWindow))
	if len(fields) > 0 {
		return q, problem(http.StatusBadRequest, "invalid-query", "Invalid query parameters",
			"the image check's query parameters are wrong; see errors", fields...)
	}
	q.step, q.window = int(step), int(window)
	return q, nil
}

// checkQuality adds the quality report and the subset recommendation to
// res. Only a cancelled request is an error: a measure or recommendation
// that cannot be made is reported in res.
func checkQuality(ctx context.Context, res *ImageCheck, g *imageio.Gray, q checkParams) error {
	rep, err := quality.Assess(g, nil, "image", nil, quality.Thresholds{})
	if err == nil {
		res.Quality = &rep
	}
	rec, err := quality.Recommend(ctx, g, nil, q.target, q.noise, 0, q.step, q.window)
	switch {
	case errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded):
		return err
	case err != nil:
		res.RecommendationError = err.Error()
	default:
		res.Recommendation = rec
	}
	return nil
}
