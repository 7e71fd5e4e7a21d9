// Colour maps computed in OKLab (Ottosson 2020, "A perceptual color space
// for image processing"; matrix coefficients from memory), so that
// lightness, the cue every viewer can read, changes evenly along the map.
//
// sequential: dark blue through a greyish middle to light yellow, with
//   lightness rising linearly. Blue–yellow is the colour axis kept by the
//   common red–green deficiencies (common practice).
// diverging: blue – near white – orange, lightness falling symmetrically
//   from the centre, for signed quantities centred on zero.
// grey: lightness only.
// Colours outside the sRGB gamut are brought in by lowering the chroma at
// constant lightness and hue.

function oklabToLinear(L, a, b) {
  const l_ = L + 0.3963377774 * a + 0.2158037573 * b;
  const m_ = L - 0.1055613458 * a - 0.0638541728 * b;
  const s_ = L - 0.0894841775 * a - 1.2914855480 * b;
  const l = l_ ** 3, m = m_ ** 3, s = s_ ** 3;
  return [
    4.0767416621 * l - 3.3077115913 * m + 0.2309699292 * s,
    -1.2684380046 * l + 2.6097574011 * m - 0.3413193965 * s,
    -0.0041960863 * l - 0.7034186147 * m + 1.7076147010 * s,
  ];
}

function encode(c) {
  // sRGB transfer function (IEC 61966-2-1).
  const v = c <= 0.0031308 ? 12.92 * c : 1.055 * c ** (1 / 2.4) - 0.055;
  return Math.round(Math.min(1, Math.max(0, v)) * 255);
}

function inGamut(rgb) { return rgb.every(c => c >= -1e-4 && c <= 1 + 1e-4); }

/** lab returns 8-bit sRGB for OKLab (L, a, b), reducing chroma into gamut. */
export function lab(L, a, b) {
  let rgb = oklabToLinear(L, a, b);
  if (!inGamut(rgb)) {
    let lo = 0, hi = 1;
    for (let i = 0; i < 30; i++) {
      const k = (lo + hi) / 2;
      if (inGamut(oklabToLinear(L, a * k, b * k))) lo = k; else hi = k;
    }
    rgb = oklabToLinear(L, a * lo, b * lo);
  }
  return rgb.map(encode);
}

function polar(C, hDeg) {
  const h = hDeg * Math.PI / 180;
  return [C * Math.cos(h), C * Math.sin(h)];
}

const builders = {
  sequential(t) {
    const [a0, b0] = polar(0.11, 260);
    const [a1, b1] = polar(0.16, 100);
    return lab(0.32 + 0.62 * t, a0 + (a1 - a0) * t, b0 + (b1 - b0) * t);
  },
  diverging(t) {
    const s = 2 * t - 1, m = Math.abs(s);
    const [a, b] = s < 0 ? polar(0.14 * m ** 0.85, 255) : polar(0.15 * m ** 0.85, 52);
    return lab(0.965 - 0.5 * m, a, b);
  },
  grey(t) { return lab(0.25 + 0.72 * t, 0, 0); },
};

/** names lists the available colour maps. */
export const names = Object.keys(builders);

/** table returns a 256-entry RGB table (Uint8ClampedArray, 768 values). */
export function table(name) {
  const f = builders[name] || builders.sequential;
  const out = new Uint8ClampedArray(256 * 3);
  for (let i = 0; i < 256; i++) {
    const [r, g, b] = f(i / 255);
    out[3 * i] = r; out[3 * i + 1] = g; out[3 * i + 2] = b;
  }
  return out;
}

/** index maps value v in [lo, hi] to a table index 0..255 (clamped). */
export function index(v, lo, hi) {
  const t = hi > lo ? (v - lo) / (hi - lo) : 0.5;
  return Math.max(0, Math.min(255, Math.round(t * 255)));
}
