package maps

import (
	"errors"
	"fmt"
	"image"
	"image/color"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat"

	"github.com/mottledic/mottle/pkg/imageio"
)

// Vectors is a displacement field on a regular Nx×Ny grid of points, for a
// vector plot.
type Vectors struct {
	// Nx and Ny are the numbers of grid points along x and y.
	Nx, Ny int
	// X and Y are the reference positions of the points in image pixels,
	// row-major (index j*Nx + i); the arrows start there.
	X, Y []float64
	// U and V are the displacement components in image pixels, row-major;
	// NaN in either marks an invalid point (no arrow).
	U, V []float64
	// Step is the grid spacing in pixels; 0 means "estimate from X, Y".
	Step float64
}

// Validate reports every problem with the vectors at once.
func (v Vectors) Validate() error {
	var errs []error
	if v.Nx < 1 || v.Ny < 1 {
		errs = append(errs, fmt.Errorf("vector grid: %d×%d points; want at least 1×1", v.Nx, v.Ny))
	}
	n := v.Nx * v.Ny
	for _, s := range []struct {
		name string
		a    []float64
	}{{"X", v.X}, {"Y", v.Y}, {"U", v.U}, {"V", v.V}} {
		if len(s.a) != n {
			errs = append(errs, fmt.Errorf("vectors %s: %d entries; want Nx*Ny = %d", s.name, len(s.a), n))
		}
	}
	if !finite(v.Step) || v.Step < 0 {
		errs = append(errs, fmt.Errorf("vectors step %v: want a finite value ≥ 0 (0 = estimate)", v.Step))
	}
	if len(errs) == 0 {
		for k := range v.U {
			if math.IsInf(v.U[k], 0) || math.IsInf(v.V[k], 0) {
				errs = append(errs, fmt.Errorf("vectors point %d: displacement (%v, %v); mark invalid points with NaN", k, v.U[k], v.V[k]))
				break
			}
			if valid(v.U[k], v.V[k]) && !(finite(v.X[k]) && finite(v.Y[k])) {
				errs = append(errs, fmt.Errorf("vectors point %d has a displacement but position (%v, %v)", k, v.X[k], v.Y[k]))
				break
			}
		}
	}
	return errors.Join(errs...)
}

func valid(u, v float64) bool { return !math.IsNaN(u) && !math.IsNaN(v) }

// VectorOptions controls RenderVectors. The zero value is usable.
type VectorOptions struct {
	// Scale is the drawn arrow length in image pixels per pixel of
	// displacement; 0 picks it so that the 99th-percentile magnitude of
	// the drawn arrows is 0.9 of their spacing.
	Scale float64
	// Every draws an arrow at every n-th grid point along each axis; 0
	// picks n so that drawn arrows are at least 16 output pixels apart.
	Every int
	// Color is the arrow colour, drawn with a dark outline; the zero value
	// is the orange #E69F00 of the colour-blind-safe palette of Okabe & Ito
	// 2008, "Color Universal Design".
	Color color.RGBA
	// Title is drawn above the picture; "" means "displacement".
	Title string
	// Note is an optional line under the picture.
	Note string
	// ScaleBar describes the scale bar; its MMPerPx also labels the
	// reference arrow in mm.
	ScaleBar ScaleBar
	// MaxWidth limits the output width in pixels; 0 means no limit.
	MaxWidth int
}

// Validate reports every problem with the options at once.
func (o VectorOptions) Validate() error {
	var errs []error
	if !finite(o.Scale) || o.Scale < 0 {
		errs = append(errs, fmt.Errorf("vector scale %v: want a finite value ≥ 0 (0 = automatic)", o.Scale))
	}
	if o.Every < 0 {
		errs = append(errs, fmt.Errorf("vector every %d: want ≥ 0 (0 = automatic)", o.Every))
	}
	if o.MaxWidth < 0 {
		errs = append(errs, fmt.Errorf("max width %d: want ≥ 0 (0 = no limit)", o.MaxWidth))
	}
	errs = append(errs, o.ScaleBar.validate()...)
	return errors.Join(errs...)
}

// VectorMap is a rendered vector plot and where its parts lie.
type VectorMap struct {
	// Image is the whole rendered plot.
	Image *image.RGBA
	// Picture is the rectangle of Image holding the (scaled) background.
	Picture image.Rectangle
	// ScaleX and ScaleY are output pixels per image pixel.
	ScaleX, ScaleY float64
	// Scale is the arrow length in image pixels per pixel of displacement.
	Scale float64
	// Every is the grid stride of the drawn arrows.
	Every int
	// Reference is the displacement, in pixels, of the legend's reference
	// arrow; Legend is the rectangle holding it.
	Reference float64
	Legend    image.Rectangle
}

// OutputPoint returns the output-pixel coordinates (in Image) of the
// background-image point (x, y).
func (m *VectorMap) OutputPoint(x, y float64) (ox, oy float64) {
	return float64(m.Picture.Min.X) + (x+0.5)*m.ScaleX - 0.5, float64(m.Picture.Min.Y) + (y+0.5)*m.ScaleY - 0.5
}

// RenderVectors draws displacement arrows from the reference positions
// over the background bg (nil for plain grey), with a reference arrow as
// legend, a scale bar and a title. The output is deterministic.
func RenderVectors(v Vectors, bg *imageio.Gray, opt VectorOptions) (*VectorMap, error) {
	if err := errors.Join(v.Validate(), opt.Validate(), checkGray(bg)); err != nil {
		return nil, fmt.Errorf("render vectors: %w", err)
	}
	face, err := newFace()
	if err != nil {
		return nil, err
	}
	defer face.Close()
	col := opt.Color
	if col == (color.RGBA{}) {
		col = color.RGBA{R: 0xe6, G: 0x9f, B: 0x00, A: 0xff}
	}
	title := opt.Title
	if title == "" {
		title = "displacement"
	}
	mags := make([]float64, len(v.U))
	for k := range mags {
		mags[k] = math.NaN()
		if valid(v.U[k], v.V[k]) {
			mags[k] = math.Hypot(v.U[k], v.V[k])
		}
	}
	w, h := pictureSize(v.X, v.Y, mags, bg)
	if err := checkSize(w, h); err != nil {
		return nil, fmt.Errorf("render vectors: %w", err)
	}
	const legendW = 120
	fixedW := pad + barGap + legendW + pad
	lay, err := newLayout(w, h, fixedW, opt.MaxWidth, face, true)
	if err != nil {
		return nil, fmt.Errorf("render vectors: %w", err)
	}
	step := v.Step
	if step == 0 {
		step = estimateStep(v.Nx, v.Ny, v.X, v.Y)
	}
	every := opt.Every
	if every == 0 {
		every = max(1, int(math.Ceil(16/(step*lay.sx))))
	}
	var drawn []float64
	for j := 0; j < v.Ny; j += every {
		for i := 0; i < v.Nx; i += every {
			if m := mags[j*v.Nx+i]; !math.IsNaN(m) {
				drawn = append(drawn, m)
			}
		}
	}
	scale := opt.Scale
	if scale == 0 {
		scale = 1
		if len(drawn) > 0 {
			sort.Float64s(drawn)
			if p := stat.Quantile(0.99, stat.Empirical, drawn, nil); p > 0 {
				scale = 0.9 * float64(every) * step / p
			}
		}
	}
	textW := max(textWidth(face, title), textWidth(face, opt.Note))
	m := &VectorMap{Image: lay.canvas(fixedW, textW, opt.MaxWidth), Picture: lay.pic, ScaleX: lay.sx, ScaleY: lay.sy, Scale: scale, Every: every}
	dst := m.Image
	lay.drawBackground(dst, bg)
	// Clip arrows to the picture.
	pic := dst.SubImage(lay.pic).(*image.RGBA)
	for j := 0; j < v.Ny; j += every {
		for i := 0; i < v.Nx; i += every {
			k := j*v.Nx + i
			if math.IsNaN(mags[k]) {
				continue
			}
			x0, y0 := m.OutputPoint(v.X[k], v.Y[k])
			drawArrow(pic, x0, y0, v.U[k]*scale*lay.sx, v.V[k]*scale*lay.sy, col)
		}
	}

	lh, asc := lineHeight(face)
	drawText(dst, face, pad, pad+asc, title, ink)
	// Legend: a reference arrow of a round displacement about 40 px long.
	x0 := lay.pic.Max.X + barGap
	y := lay.pic.Min.Y
	drawText(dst, face, x0, y+asc, "reference arrow", ink)
	ref := niceLength(40 / (scale * lay.sx))
	m.Reference = ref
	L := ref * scale * lay.sx
	ay := float64(y+lh+14) + 0.5
	m.Legend = image.Rect(x0, y+lh+4, x0+int(math.Ceil(L))+2, y+lh+25)
	drawArrow(dst, float64(x0), ay, L, 0, col)
	label := formatNumber(ref) + " px"
	if opt.ScaleBar.MMPerPx > 0 {
		label += " = " + formatNumber(ref*opt.ScaleBar.MMPerPx) + " mm"
	}
	drawText(dst, face, x0, y+lh+28+asc, label, ink)
	drawText(dst, face, x0, y+2*lh+30+asc, fmt.Sprintf("every %d point(s)", every), frame)
	lay.drawFooter(dst, face, opt.ScaleBar, w, opt.Note)
	return m, nil
}

// drawArrow draws an arrow from (x, y) along (dx, dy) in output pixels:
// a dark outline, then the coloured shaft and head. Arrows shorter than
// half a pixel are drawn as a dot.
func drawArrow(dst *image.RGBA, x, y, dx, dy float64, c color.RGBA) {
	L := math.Hypot(dx, dy)
	// vector.Rasterizer has pixel centres at half-integers.
	x, y = x+0.5, y+0.5
	if L < 0.5 {
		fillPolygon(dst, square(x, y, 1.5), ink)
		fillPolygon(dst, square(x, y, 0.8), c)
		return
	}
	ux, uy := dx/L, dy/L
	nx, ny := -uy, ux
	head := math.Min(0.4*L, 8)
	poly := func(w, hw, extra float64) [][2]float64 {
		bx, by := x+ux*(L-head), y+uy*(L-head)
		tx, ty := x+ux*(L+extra), y+uy*(L+extra)
		sx, sy := x-ux*extra, y-uy*extra
		return [][2]float64{
			{sx + nx*w, sy + ny*w}, {bx + nx*w, by + ny*w}, {bx + nx*hw, by + ny*hw},
			{tx, ty},
			{bx - nx*hw, by - ny*hw}, {bx - nx*w, by - ny*w}, {sx - nx*w, sy - ny*w},
		}
	}
	fillPolygon(dst, poly(1.6, 0.5*head+1.2, 1.2), ink)
	fillPolygon(dst, poly(0.75, 0.5*head, 0), c)
}

func square(x, y, r float64) [][2]float64 {
	return [][2]float64{{x - r, y - r}, {x + r, y - r}, {x + r, y + r}, {x - r, y + r}}
}

// estimateStep returns the median distance between grid neighbours with
// finite positions, or 1 when there are none.
func estimateStep(nx, ny int, xs, ys []float64) float64 {
	var d []float64
	for j := 0; j < ny; j++ {
		for i := 0; i < nx; i++ {
			k := j*nx + i
			if i+1 < nx {
				if s := math.Hypot(xs[k+1]-xs[k], ys[k+1]-ys[k]); finite(s) && s > 0 {
					d = append(d, s)
				}
			}
			if j+1 < ny {
				if s := math.Hypot(xs[k+nx]-xs[k], ys[k+nx]-ys[k]); finite(s) && s > 0 {
					d = append(d, s)
				}
			}
		}
	}
	if len(d) == 0 {
		return 1
	}
	sort.Float64s(d)
	return stat.Quantile(0.5, stat.Empirical, d, nil)
}
