package maps

import (
	"fmt"
	"image/color"
	"math"
	"sort"
	"strings"

	"gonum.org/v1/gonum/stat"
)

// Colormap maps a normalised value t in [0, 1] to a colour. Use the
// constructors Viridis, Cividis and CoolWarm, or ByName; the zero value has
// no colours and maps everything to transparent.
type Colormap struct {
	// Name is the map's short name as accepted by ByName.
	Name string
	// Diverging reports whether the map has a neutral centre meant for zero
	// of a signed quantity.
	Diverging bool
	// Source names the publication the colours come from.
	Source string

	lut [][3]float64 // sRGB in [0, 1], evenly spaced in t over [0, 1]
}

// Names of the built-in colour maps, as accepted by ByName.
const (
	NameViridis  = "viridis"
	NameCividis  = "cividis"
	NameCoolWarm = "coolwarm"
)

// Viridis returns the sequential map viridis (S. van der Walt and N. Smith,
// 2015, designed for matplotlib 2.0; CC0): perceptually uniform in
// CAM02-UCS, with L* rising monotonically, readable with the common colour
// vision deficiencies and in greyscale. It is the default for magnitudes.
func Viridis() Colormap {
	return Colormap{Name: NameViridis, Source: "van der Walt & Smith 2015, viridis (matplotlib, CC0)", lut: viridisData[:]}
}

// Cividis returns the sequential map cividis (Nuñez, Anderton & Renslow
// 2018, "Optimizing colormaps with consideration for color vision
// deficiency to enable accurate interpretation of scientific data", PLoS ONE
// 13(7):e0199239), which looks nearly the same to viewers with and without
// red–green colour vision deficiency.
func Cividis() Colormap {
	return Colormap{Name: NameCividis, Source: "Nuñez, Anderton & Renslow 2018, PLoS ONE 13:e0199239", lut: cividisData[:]}
}

// coolWarmEnds are the published end colours of the cool–warm map, sRGB
// (59, 76, 192) and (180, 4, 38) (Moreland 2009, section 5).
var coolWarmEnds = [2][3]float64{{59.0 / 255, 76.0 / 255, 192.0 / 255}, {180.0 / 255, 4.0 / 255, 38.0 / 255}}

// CoolWarm returns Moreland's diverging cool–warm map, blue through a
// neutral light grey to red, computed from its published construction:
// interpolation in Msh space between the published end colours through an
// unsaturated centre of magnitude 88 (Moreland 2009, "Diverging Color Maps
// for Scientific Visualization", ISVC 2009, LNCS 5876:92–103). The two
// halves have equal lightness at equal distance from the centre, so neither
// sign looks stronger. It is the default for signed quantities.
func CoolWarm() Colormap {
	const n = 257 // odd, so that t = 0.5 is an entry
	lut := make([][3]float64, n)
	for i := range lut {
		lut[i] = interpolateMsh(coolWarmEnds[0], coolWarmEnds[1], float64(i)/(n-1))
	}
	return Colormap{Name: NameCoolWarm, Diverging: true, Source: "Moreland 2009, Diverging Color Maps for Scientific Visualization", lut: lut}
}

// ByName returns the built-in colour map with the given name
// (case-insensitive): "viridis", "cividis" or "coolwarm".
func ByName(name string) (Colormap, error) {
	switch strings.ToLower(strings.TrimSpace(name)) {
	case NameViridis:
		return Viridis(), nil
	case NameCividis:
		return Cividis(), nil
	case NameCoolWarm:
		return CoolWarm(), nil
	}
	return Colormap{}, fmt.Errorf("colour map %q: unknown; use one of %s, %s, %s", name, NameViridis, NameCividis, NameCoolWarm)
}

// signedQuantities are the result quantities (names of the shared
// conventions) that take either sign, with zero meaning "no change".
var signedQuantities = map[string]bool{
	"u": true, "v": true, "F12": true, "F21": true,
	"E11": true, "E22": true, "E12": true,
	"H11": true, "H22": true, "H12": true,
	"A11": true, "A22": true, "A12": true,
	"eps11": true, "eps22": true, "eps12": true,
	"E_max": true, "E_min": true, "rotation_deg": true,
	// The principal direction is a signed angle in (−90°, 90°]; centred
	// on 0 (along x) the two ends both mean "along y", since −90° and 90°
	// are the same direction.
	"E_max_angle_deg": true,
}

// binaryQuantities are the result quantities that are 1 or 0 (yes or no).
var binaryQuantities = map[string]bool{"valid": true, "eps_valid": true}

// Binary reports whether a result quantity takes only the values 0 and 1
// (valid, eps_valid). Render draws such quantities as sharp steps with the
// range [0, 1] (see Options.Steps).
func Binary(name string) bool { return binaryQuantities[name] }

// ForQuantity returns the default colour map for a result quantity: the
// diverging CoolWarm for signed quantities (displacements, strains,
// rotation, principal angle, off-diagonal F), the sequential Viridis for everything else
// (magnitudes, zncc, standard deviations, F11, F22, detF).
func ForQuantity(name string) Colormap {
	if signedQuantities[name] {
		return CoolWarm()
	}
	return Viridis()
}

// RGB returns the colour at t in [0, 1] as sRGB channels in [0, 1],
// interpolating linearly between table entries. t is clamped to [0, 1].
func (c Colormap) RGB(t float64) [3]float64 {
	n := len(c.lut)
	if n == 0 || math.IsNaN(t) {
		return [3]float64{}
	}
	if n == 1 {
		return c.lut[0]
	}
	t = clip01(t)
	f := t * float64(n-1)
	i := int(f)
	if i >= n-1 {
		return c.lut[n-1]
	}
	w := f - float64(i)
	a, b := c.lut[i], c.lut[i+1]
	return [3]float64{a[0] + w*(b[0]-a[0]), a[1] + w*(b[1]-a[1]), a[2] + w*(b[2]-a[2])}
}

// At returns the colour at t in [0, 1] (clamped) as an opaque 8-bit colour,
// or a fully transparent colour when t is NaN or the map is empty.
func (c Colormap) At(t float64) color.NRGBA {
	if len(c.lut) == 0 || math.IsNaN(t) {
		return color.NRGBA{}
	}
	v := c.RGB(t)
	return color.NRGBA{R: to8(v[0]), G: to8(v[1]), B: to8(v[2]), A: 255}
}

func to8(v float64) uint8 { return uint8(math.Round(clip01(v) * 255)) }

// Norm maps values to t in [0, 1] for a colour map over the range [Lo, Hi].
// For a diverging map whose range contains zero strictly inside, zero maps
// to the neutral centre t = 0.5 and each side is scaled separately (a
// two-slope normalisation, common practice); otherwise the scale is linear.
type Norm struct {
	Lo, Hi    float64
	Diverging bool
}

// T returns the normalised position of v, clamped to [0, 1]; NaN stays NaN.
func (n Norm) T(v float64) float64 {
	if math.IsNaN(v) {
		return v
	}
	if n.Diverging && n.Lo < 0 && n.Hi > 0 {
		if v < 0 {
			return clip01(0.5 - 0.5*v/n.Lo)
		}
		return clip01(0.5 + 0.5*v/n.Hi)
	}
	if n.Hi == n.Lo {
		return 0.5
	}
	return clip01((v - n.Lo) / (n.Hi - n.Lo))
}

// AutoRange returns a robust display range for values: the 1st to 99th
// percentiles of the finite values (empirical quantiles, gonum stat.Empirical), or, when
// symmetric is true (for a diverging map), ±max(|p1|, |p99|) so that zero
// sits at the centre. NaN and ±Inf are ignored. With no finite values it
// returns an error; a constant field gets a small range around its value.
func AutoRange(values []float64, symmetric bool) (lo, hi float64, err error) {
	v := make([]float64, 0, len(values))
	for _, x := range values {
		if !math.IsNaN(x) && !math.IsInf(x, 0) {
			v = append(v, x)
		}
	}
	if len(v) == 0 {
		return 0, 0, fmt.Errorf("auto range: no finite values among %d; give the range explicitly", len(values))
	}
	sort.Float64s(v)
	lo, hi = stat.Quantile(0.01, stat.Empirical, v, nil), stat.Quantile(0.99, stat.Empirical, v, nil)
	if symmetric {
		m := math.Max(math.Abs(lo), math.Abs(hi))
		if m == 0 {
			m = 1
		}
		return -m, m, nil
	}
	if lo == hi {
		d := math.Abs(lo) * 0.05
		if d == 0 {
			d = 1
		}
		return lo - d, hi + d, nil
	}
	return lo, hi, nil
}
