package calib

import (
	"context"
	"errors"
	"fmt"
	"strings"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Image is a named calibration image.
type Image struct {
	Name string
	Gray *imageio.Gray
}

// CalibrateImages detects target t in every image and calibrates from the
// views where it was found. Images rejected by Detect are listed in the
// returned slice (with the reason) and left out. It returns an error if the
// images differ in size (naming the first that differs), or if fewer than
// three views are usable (listing every rejection).
func CalibrateImages(ctx context.Context, imgs []Image, t *Target, d DetectOptions, o Options) (*Result, []Rejected, error) {
	if len(imgs) == 0 {
		return nil, nil, errors.New("calibrate: no images; give 10–20 views of the target")
	}
	if t == nil {
		return nil, nil, errors.New("calibrate: no target geometry; give the JSON file written by mottle target")
	}
	w, h := imgs[0].Gray.W, imgs[0].Gray.H
	for _, im := range imgs[1:] {
		if im.Gray.W != w || im.Gray.H != h {
			return nil, nil, fmt.Errorf("calibrate: image %s is %d×%d px but %s is %d×%d px: every calibration image must come from the same camera at the same size",
				im.Name, im.Gray.W, im.Gray.H, imgs[0].Name, w, h)
		}
	}
	var views []View
	var rejected []Rejected
	for _, im := range imgs {
		if err := ctx.Err(); err != nil {
			return nil, nil, fmt.Errorf("calibrate: %w", err)
		}
		det, err := Detect(im.Gray, t, d)
		var re *RejectError
		switch {
		case errors.As(err, &re):
			rejected = append(rejected, Rejected{Image: im.Name, Reason: re.Reason, Detail: re.Detail})
			continue
		case err != nil:
			return nil, nil, fmt.Errorf("calibrate: image %s: %w", im.Name, err)
		}
		views = append(views, View{Name: im.Name, Points: det.Points})
	}
	if len(views) < minViews {
		var b strings.Builder
		for _, r := range rejected {
			fmt.Fprintf(&b, "; %s: %s (%s)", r.Image, r.Reason, r.Detail)
		}
		hint := ""
		if len(views) == 0 && len(rejected) == len(imgs) {
			hint = fmt.Sprintf("; check that the images show the %s %d×%d target of the target file", t.Kind, t.Cols, t.Rows)
		}
		return nil, rejected, fmt.Errorf("calibrate: %d of %d images usable, at least %d needed (10–20 recommended, the target tilted 10–40° in different directions)%s%s",
			len(views), len(imgs), minViews, b.String(), hint)
	}
	res, err := Calibrate(ctx, views, w, h, o)
	if err != nil {
		return nil, rejected, err
	}
	return res, rejected, nil
}
