package main

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/quality"
	"github.com/mottledic/mottle/pkg/series"
)

// subsetFlag is the value of --subset: an odd size in px, or "auto" for the
// subset chosen for a target uncertainty (--target-std).
type subsetFlag struct {
	n    int
	auto bool
}

func (s *subsetFlag) String() string {
	if s == nil {
		return ""
	}
	if s.auto {
		return "auto"
	}
	return strconv.Itoa(s.n)
}

func (s *subsetFlag) Set(v string) error {
	if v == "auto" {
		s.auto = true
		return nil
	}
	n, err := strconv.Atoi(v)
	if err != nil {
		return fmt.Errorf("%q: want an odd number of px, e.g. 31, or auto (with --target-std)", v)
	}
	s.n, s.auto = n, false
	return nil
}

// subsetAuto reports whether --subset auto was given on fs.
func subsetAuto(fs *flag.FlagSet) bool {
	f := fs.Lookup("subset")
	if f == nil {
		return false
	}
	s, ok := f.Value.(*subsetFlag)
	return ok && s.auto
}

// autoOptions are the flags of the automatic subset.
type autoOptions struct {
	target, fraction *float64
	static           *string
}

// autoFlags registers the flags of the automatic subset on fs.
func autoFlags(fs *flag.FlagSet) autoOptions {
	return autoOptions{
		target: fs.Float64("target-std", 0.01, "with --subset auto: the displacement standard deviation to meet, `px`"),
		fraction: fs.Float64("subset-fraction", quality.DefaultFraction,
			"with --subset auto: the share of points at which the subset must meet --target-std"),
		static: fs.String("static", "", "with --subset auto: a second image `file` of the unloaded, unmoved specimen, "+
			"to measure the noise from the static pair (default: --noise, or an estimate from the reference alone)"),
	}
}

// printQuality prints the image quality warnings of the reports, or that
// there are none.
func printQuality(w io.Writer, rs []quality.Report) {
	ws := quality.Warnings(rs)
	if len(ws) == 0 {
		fmt.Fprintln(w, "image quality: no warnings (saturation, clipping, grey range, gradient, speckle size, focus, lighting)")
		return
	}
	fmt.Fprintf(w, "image quality: %d warning(s)\n", len(ws))
	for _, x := range ws {
		fmt.Fprintf(w, "  %s: %s\n    at the bench: %s (%s)\n", x.Image, x.Message, x.Action, x.Source)
	}
}

// chooseSubset sets job.Params.Subset to the automatic subset for the
// target of a, prints the choice and writes subset_choice.json and
// required_subset.csv into dir. lim bounds the static image.
func chooseSubset(ctx context.Context, w io.Writer, job *analysis.Job, a autoOptions, lim imageio.Limits, dir string) error {
	p := &job.Params
	// The ROI mask, built as the analysis builds it (the subset is not
	// known yet: any valid one will do for the mask).
	q := *p
	q.Subset = analysis.Defaults().Subset
	opt, err := analysis.CorrelationOptions(q, job.Ref.W, job.Ref.H, job.Mask)
	if err != nil {
		return err
	}
	noise, source := p.Noise, "--noise"
	switch {
	case noise > 0:
	case *a.static != "":
		st, err := imageio.ReadFile(*a.static, lim)
		if err != nil {
			return fmt.Errorf("--static: %w", err)
		}
		if noise, err = quality.NoiseFromPair(job.Ref, st, opt.Mask); err != nil {
			return fmt.Errorf("--static %s: %w", *a.static, err)
		}
		source = "the static pair"
	default:
		if noise, err = quality.NoiseFromImage(job.Ref, opt.Mask); err != nil {
			return fmt.Errorf("--subset auto: %w; give --noise or --static", err)
		}
		source = "the reference image alone (rough; a --static image measures it properly)"
	}
	if !(noise > 0) {
		return fmt.Errorf("--subset auto: the noise σ is %g: the images look noise-free; give the camera's --noise in grey levels", noise)
	}
	maxSub := min(analysis.MaxSubset, min(job.Ref.W, job.Ref.H))
	if maxSub%2 == 0 {
		maxSub--
	}
	c, err := quality.ChooseSubset(ctx, job.Ref, quality.SubsetOptions{Target: *a.target, Noise: noise, Fraction: *a.fraction,
		Mask: opt.Mask, Step: p.Step, Max: max(maxSub, quality.DefaultMinSub)})
	if err != nil {
		return fmt.Errorf("--subset auto --target-std %g: %w", *a.target, err)
	}
	p.Subset = c.Subset
	fmt.Fprintf(w, "automatic subset: %d px, the smallest whose predicted displacement σ is at most %g px at %.0f %% of the points "+
		"(%.3g px there, median %.3g px; met at %.0f %%), with noise σ %.3g grey levels from %s; random error only: bias and "+
		"strain gradients add to it. The subset each point needs: required_subset.csv\n",
		c.Subset, *a.target, 100*c.Fraction, c.Predicted, c.Median, 100*c.Met, noise, source)
	return writeChoice(dir, c)
}

// writeChoice writes the subset choice as JSON and its map as CSV.
func writeChoice(dir string, c *quality.SubsetChoice) error {
	b, err := json.MarshalIndent(c, "", " ")
	if err != nil {
		return fmt.Errorf("subset choice: %w", err)
	}
	if err := os.WriteFile(filepath.Join(dir, "subset_choice.json"), b, 0o644); err != nil {
		return fmt.Errorf("write the subset choice: %w", err)
	}
	f, err := os.Create(filepath.Join(dir, "required_subset.csv"))
	if err != nil {
		return fmt.Errorf("write the required-subset map: %w", err)
	}
	cw := csv.NewWriter(f)
	cw.Write([]string{"x_px", "y_px", "required_subset_px"})
	for j := 0; j < c.Ny; j++ {
		for i := 0; i < c.Nx; i++ {
			r := c.Required[j*c.Nx+i]
			cell := strconv.Itoa(r)
			switch r {
			case -1:
				continue // not even the smallest subset fits in the ROI
			case 0:
				cell = "" // no subset up to the largest tried meets the target
			}
			cw.Write([]string{strconv.Itoa(c.X0 + i*c.Step), strconv.Itoa(c.Y0 + j*c.Step), cell})
		}
	}
	cw.Flush()
	return errors.Join(cw.Error(), f.Close())
}

// printFlagged prints the frames of a series flagged for a drop of image
// quality, with the first warning of each.
func printFlagged(w io.Writer, c series.Curve) {
	fl := c.Flagged()
	if len(fl) == 0 {
		return
	}
	fmt.Fprintf(w, "image quality: %d row(s) flagged (see report.html):\n", len(fl))
	for _, i := range fl {
		r := c.Rows[i]
		x := r.Quality.Warnings[0]
		more := ""
		if n := len(r.Quality.Warnings); n > 1 {
			more = fmt.Sprintf(" (+%d more)", n-1)
		}
		fmt.Fprintf(w, "  %d %s: %s%s; at the bench: %s\n", r.Index, r.Name, x.Message, more, x.Action)
	}
}
