// Colour maps: the very tables the server draws its PNG maps with
// (js/cmaps.js is made by the server from pkg/maps when it starts), so a
// downloaded map.png shows the colours of the map on screen.
//
// viridis: sequential, perceptually uniform, lightness rising (van der Walt
//   & Smith 2015); the default for magnitudes.
// cividis: sequential, nearly the same for viewers with and without
//   red–green colour-vision deficiency (Nuñez, Anderton & Renslow 2018).
// coolwarm: diverging blue – light grey – red with equal lightness at equal
//   distance from the centre (Moreland 2009); the default for signed
//   quantities, with zero at the centre.

import { maps, defaults, fallback } from './cmaps.js';

/** names lists the available colour maps. */
export const names = Object.keys(maps);

/** N is the number of entries of a table from table(). */
export const N = 4096;

/** forQuantity is the server's default map of a quantity. */
export function forQuantity(q) { return defaults[q] || fallback; }

/** diverging reports whether a map has a neutral centre for zero. */
export function diverging(name) { return !!(maps[name] || maps[fallback]).diverging; }

/** rgb returns the 8-bit colour at t in [0, 1] (clamped) exactly as the
 * server's Colormap.At: linear interpolation between table entries, then
 * rounding. NaN gives null. */
export function rgb(name, t) {
  if (Number.isNaN(t)) return null;
  const lut = (maps[name] || maps[fallback]).rgb, n = lut.length / 3;
  t = Math.min(1, Math.max(0, t));
  const f = t * (n - 1), i = Math.floor(f);
  const to8 = v => Math.round(Math.min(1, Math.max(0, v)) * 255);
  if (i >= n - 1) return [to8(lut[3 * (n - 1)]), to8(lut[3 * (n - 1) + 1]), to8(lut[3 * (n - 1) + 2])];
  const w = f - i, out = [0, 0, 0];
  for (let c = 0; c < 3; c++) { const a = lut[3 * i + c], b = lut[3 * i + 3 + c]; out[c] = to8(a + w * (b - a)); }
  return out;
}

/** norm returns the position t of v over [lo, hi] as the server's
 * maps.Norm: for a diverging map whose range holds zero strictly inside,
 * zero is the centre and each side is scaled on its own. */
export function norm(v, lo, hi, div) {
  if (Number.isNaN(v)) return NaN;
  const c = x => Math.min(1, Math.max(0, x));
  if (div && lo < 0 && hi > 0) return v < 0 ? c(0.5 - 0.5 * v / lo) : c(0.5 + 0.5 * v / hi);
  if (hi === lo) return 0.5;
  return c((v - lo) / (hi - lo));
}

/** color is the 8-bit colour of value v over [lo, hi] with map name. */
export function color(name, v, lo, hi) { return rgb(name, norm(v, lo, hi, diverging(name))); }

/** table returns an N-entry RGB table (Uint8ClampedArray, 3N values). */
export function table(name) {
  const out = new Uint8ClampedArray(N * 3);
  for (let i = 0; i < N; i++) {
    const [r, g, b] = rgb(name, i / (N - 1));
    out[3 * i] = r; out[3 * i + 1] = g; out[3 * i + 2] = b;
  }
  return out;
}

/** index maps value v over [lo, hi] to a table index 0..N−1, with the
 * two-slope normalisation for a diverging map. */
export function index(v, lo, hi, div) {
  return Math.round(norm(v, lo, hi, div) * (N - 1));
}
