// Speckle size from the image autocorrelation, and the parameter advice
// that follows from it.
//
// The speckle size is taken as the full width at half maximum of the
// central peak of the normalised autocorrelation of a centre crop, averaged
// over the x and y directions (common practice). The autocorrelation is
// computed through the FFT (Wiener–Khinchin theorem), with zero padding so
// that it is not circular.

function fft(re, im, inverse) {
  const n = re.length;
  for (let i = 1, j = 0; i < n; i++) {
    let bit = n >> 1;
    for (; j & bit; bit >>= 1) j ^= bit;
    j ^= bit;
    if (i < j) { [re[i], re[j]] = [re[j], re[i]]; [im[i], im[j]] = [im[j], im[i]]; }
  }
  for (let len = 2; len <= n; len <<= 1) {
    const ang = (inverse ? 2 : -2) * Math.PI / len;
    const wr = Math.cos(ang), wi = Math.sin(ang);
    for (let i = 0; i < n; i += len) {
      let cr = 1, ci = 0;
      for (let k = 0; k < len / 2; k++) {
        const a = i + k, b = a + len / 2;
        const tr = re[b] * cr - im[b] * ci, ti = re[b] * ci + im[b] * cr;
        re[b] = re[a] - tr; im[b] = im[a] - ti;
        re[a] += tr; im[a] += ti;
        const nr = cr * wr - ci * wi; ci = cr * wi + ci * wr; cr = nr;
      }
    }
  }
}

function fft2(re, im, n, inverse) {
  const rr = new Float64Array(n), ri = new Float64Array(n);
  for (let y = 0; y < n; y++) {
    for (let x = 0; x < n; x++) { rr[x] = re[y * n + x]; ri[x] = im[y * n + x]; }
    fft(rr, ri, inverse);
    for (let x = 0; x < n; x++) { re[y * n + x] = rr[x]; im[y * n + x] = ri[x]; }
  }
  for (let x = 0; x < n; x++) {
    for (let y = 0; y < n; y++) { rr[y] = re[y * n + x]; ri[y] = im[y * n + x]; }
    fft(rr, ri, inverse);
    for (let y = 0; y < n; y++) { re[y * n + x] = rr[y]; im[y * n + x] = ri[y]; }
  }
}

/**
 * speckleSize returns {size, sx, sy} in pixels for a grey image (Float32Array
 * or Array, width w, height h), or null when the image is too small or flat.
 */
export function speckleSize(grey, w, h) {
  let c = 1;
  while (c * 2 <= Math.min(w, h, 256)) c *= 2;
  if (c < 16) return null;
  const n = 2 * c;
  const re = new Float64Array(n * n), im = new Float64Array(n * n);
  const ox = (w - c) >> 1, oy = (h - c) >> 1;
  let mean = 0;
  for (let y = 0; y < c; y++) for (let x = 0; x < c; x++) mean += grey[(oy + y) * w + ox + x];
  mean /= c * c;
  for (let y = 0; y < c; y++) for (let x = 0; x < c; x++) re[y * n + x] = grey[(oy + y) * w + ox + x] - mean;
  fft2(re, im, n, false);
  for (let i = 0; i < n * n; i++) { re[i] = re[i] * re[i] + im[i] * im[i]; im[i] = 0; }
  fft2(re, im, n, true);
  const peak = re[0];
  if (!(peak > 0)) return null;
  // Normalise by the overlap count so that large shifts are not biased low.
  const at = (dx, dy) => re[((dy + n) % n) * n + ((dx + n) % n)] / peak * (c * c) / ((c - Math.abs(dx)) * (c - Math.abs(dy)));
  const half = dir => {
    let prev = 1;
    for (let s = 1; s < c / 2; s++) {
      const v = dir === 'x' ? (at(s, 0) + at(-s, 0)) / 2 : (at(0, s) + at(0, -s)) / 2;
      if (v <= 0.5) return 2 * (s - 1 + (prev - 0.5) / (prev - v));
      prev = v;
    }
    return NaN;
  };
  const sx = half('x'), sy = half('y');
  if (!Number.isFinite(sx) || !Number.isFinite(sy)) return null;
  return { size: (sx + sy) / 2, sx, sy };
}

function odd(v) { const r = Math.ceil(v); return r % 2 ? r : r + 1; }

/**
 * advice returns the suggested subset and step for speckle size s (px) and
 * chosen subset, and the virtual strain gauge for the chosen step and
 * strain window. Sources: iDICs Good Practices Guide 2018 (speckles 3–5 px,
 * at least 3 speckles across a subset; from memory); step a third to a
 * half of the subset (common practice); VSG = (window − 1)·step + subset.
 */
export function advice(s, subset, step, window) {
  const out = { vsg: (window - 1) * step + subset };
  out.stepLo = Math.max(1, Math.round(subset / 3));
  out.stepHi = Math.max(1, Math.round(subset / 2));
  if (Number.isFinite(s) && s > 0) {
    // Three speckles across; with dark and light speckles of about equal
    // area, the speckle pitch is about twice the size (common practice).
    out.subsetMin = odd(3 * s);
    out.subsetPitch = odd(6 * s);
    out.speckleNote = s < 3 ? 'below 3 px: risk of aliasing; a coarser pattern or a closer camera helps'
      : s > 5 ? 'above 5 px: subsets must be large; a finer pattern would allow smaller subsets'
        : 'within the suggested 3–5 px';
    out.speckleOK = s >= 3 && s <= 5;
    out.subsetOK = subset >= out.subsetMin;
  }
  out.stepOK = step >= out.stepLo && step <= out.stepHi;
  return out;
}
