package maps

import "math"

// Colour-space conversions used to build and check colour maps. sRGB
// transfer function and the linear-sRGB ↔ CIE XYZ matrices (D65 white) are
// from IEC 61966-2-1:1999; CIELAB from CIE 15:2004. The matrix entries are
// the commonly tabulated ones (from memory; they reproduce Y = 1 for white
// and the published L* of the sRGB primaries to 0.01 in the tests).

// d65 is the CIE XYZ of the D65 reference white with Y = 1.
var d65 = [3]float64{0.95047, 1.0, 1.08883}

// srgbToLinear undoes the sRGB transfer function for one channel in [0, 1].
func srgbToLinear(c float64) float64 {
	if c <= 0.04045 {
		return c / 12.92
	}
	return math.Pow((c+0.055)/1.055, 2.4)
}

// linearToSRGB applies the sRGB transfer function to one channel in [0, 1].
func linearToSRGB(c float64) float64 {
	if c <= 0.0031308 {
		return 12.92 * c
	}
	return 1.055*math.Pow(c, 1/2.4) - 0.055
}

// rgbToXYZ converts sRGB in [0, 1] to CIE XYZ (D65, Y of white = 1).
func rgbToXYZ(c [3]float64) [3]float64 {
	r, g, b := srgbToLinear(c[0]), srgbToLinear(c[1]), srgbToLinear(c[2])
	return [3]float64{
		0.4124564*r + 0.3575761*g + 0.1804375*b,
		0.2126729*r + 0.7151522*g + 0.0721750*b,
		0.0193339*r + 0.1191920*g + 0.9503041*b,
	}
}

// xyzToRGB converts CIE XYZ (D65) to sRGB, clipping each channel to [0, 1].
func xyzToRGB(x [3]float64) [3]float64 {
	r := 3.2404542*x[0] - 1.5371385*x[1] - 0.4985314*x[2]
	g := -0.9692660*x[0] + 1.8760108*x[1] + 0.0415560*x[2]
	b := 0.0556434*x[0] - 0.2040259*x[1] + 1.0572252*x[2]
	return [3]float64{clip01(linearToSRGB(clip01(r))), clip01(linearToSRGB(clip01(g))), clip01(linearToSRGB(clip01(b)))}
}

func clip01(v float64) float64 {
	if v < 0 {
		return 0
	}
	if v > 1 {
		return 1
	}
	return v
}

// labF and labFInv are the CIELAB companding function and its inverse.
func labF(t float64) float64 {
	const d = 6.0 / 29
	if t > d*d*d {
		return math.Cbrt(t)
	}
	return t/(3*d*d) + 4.0/29
}

func labFInv(t float64) float64 {
	const d = 6.0 / 29
	if t > d {
		return t * t * t
	}
	return 3 * d * d * (t - 4.0/29)
}

// rgbToLab converts sRGB in [0, 1] to CIELAB (L*, a*, b*) relative to D65.
func rgbToLab(c [3]float64) [3]float64 {
	x := rgbToXYZ(c)
	fx, fy, fz := labF(x[0]/d65[0]), labF(x[1]/d65[1]), labF(x[2]/d65[2])
	return [3]float64{116*fy - 16, 500 * (fx - fy), 200 * (fy - fz)}
}

// labToRGB converts CIELAB relative to D65 to sRGB, clipped to [0, 1].
func labToRGB(l [3]float64) [3]float64 {
	fy := (l[0] + 16) / 116
	fx := fy + l[1]/500
	fz := fy - l[2]/200
	return xyzToRGB([3]float64{d65[0] * labFInv(fx), d65[1] * labFInv(fy), d65[2] * labFInv(fz)})
}

// labToMsh and mshToLab convert between CIELAB and Moreland's polar
// coordinates Msh: M = |Lab|, s = acos(L*/M), h = atan2(b*, a*)
// (Moreland 2009, "Diverging Color Maps for Scientific Visualization",
// ISVC 2009, LNCS 5876:92–103, section 4).
func labToMsh(l [3]float64) [3]float64 {
	m := math.Sqrt(l[0]*l[0] + l[1]*l[1] + l[2]*l[2])
	if m == 0 {
		return [3]float64{}
	}
	return [3]float64{m, math.Acos(l[0] / m), math.Atan2(l[2], l[1])}
}

func mshToLab(m [3]float64) [3]float64 {
	return [3]float64{
		m[0] * math.Cos(m[1]),
		m[0] * math.Sin(m[1]) * math.Cos(m[2]),
		m[0] * math.Sin(m[1]) * math.Sin(m[2]),
	}
}

// adjustHue returns the hue for an unsaturated colour of magnitude mUnsat
// when interpolating from the saturated colour msh, so that the hue spins
// away from it (Moreland 2009, section 4, "AdjustHue").
func adjustHue(msh [3]float64, mUnsat float64) float64 {
	if msh[0] >= mUnsat {
		return msh[2]
	}
	spin := msh[1] * math.Sqrt(mUnsat*mUnsat-msh[0]*msh[0]) / (msh[0] * math.Sin(msh[1]))
	if msh[2] > -math.Pi/3 {
		return msh[2] + spin
	}
	return msh[2] - spin
}

// interpolateMsh interpolates between two sRGB colours through Msh space
// with Moreland's rule: when both ends are saturated and their hues differ
// by more than π/3, pass through an unsaturated white of magnitude
// max(M1, M2, 88) at the middle (Moreland 2009, section 4,
// "InterpolateColor").
func interpolateMsh(c1, c2 [3]float64, t float64) [3]float64 {
	m1 := labToMsh(rgbToLab(c1))
	m2 := labToMsh(rgbToLab(c2))
	if m1[1] > 0.05 && m2[1] > 0.05 && math.Abs(m1[2]-m2[2]) > math.Pi/3 {
		mid := math.Max(math.Max(m1[0], m2[0]), 88)
		if t < 0.5 {
			m2 = [3]float64{mid, 0, 0}
			t *= 2
		} else {
			m1 = [3]float64{mid, 0, 0}
			t = 2*t - 1
		}
	}
	switch {
	case m1[1] < 0.05 && m2[1] > 0.05:
		m1[2] = adjustHue(m2, m1[0])
	case m2[1] < 0.05 && m1[1] > 0.05:
		m2[2] = adjustHue(m1, m2[0])
	}
	var m [3]float64
	for i := range m {
		m[i] = (1-t)*m1[i] + t*m2[i]
	}
	return labToRGB(mshToLab(m))
}
