// Colour helpers: CIELAB (D65) to sRGB for drawing calibration tables, the false-colour scale of
// order maps and the colours that mark flagged pixels.

// D65 reference white, CIE 1931 2° observer (X, Y, Z with Y = 1).
const WHITE = [0.95047, 1.0, 1.08883];
const EPSILON = 216 / 24389;
const KAPPA = 24389 / 27;

function labToXyz([L, a, b]) {
  const fy = (L + 16) / 116;
  const fx = fy + a / 500;
  const fz = fy - b / 200;
  const inv = (f) => (f ** 3 > EPSILON ? f ** 3 : (116 * f - 16) / KAPPA);
  const y = L > KAPPA * EPSILON ? fy ** 3 : L / KAPPA;
  return [inv(fx) * WHITE[0], y * WHITE[1], inv(fz) * WHITE[2]];
}

function gamma(c) {
  const v = c <= 0.0031308 ? 12.92 * c : 1.055 * c ** (1 / 2.4) - 0.055;
  return Math.round(Math.min(1, Math.max(0, v)) * 255);
}

// CIELAB (D65) → 8-bit sRGB, clipped to the gamut.
export function labToRgb(lab) {
  const [x, y, z] = labToXyz(lab);
  const r = 3.2404542 * x - 1.5371385 * y - 0.4985314 * z;
  const g = -0.969266 * x + 1.8760108 * y + 0.041556 * z;
  const b = 0.0556434 * x - 0.2040259 * y + 1.0572252 * z;
  return [gamma(r), gamma(g), gamma(b)];
}

export const css = ([r, g, b]) => `rgb(${r} ${g} ${b})`;

// The "cividis" scale (perceptually uniform, readable with colour-vision deficiencies) as the
// polynomial fit that the service's preview pictures also use; t in [0, 1].
export function cividis(t) {
  const s = Math.min(1, Math.max(0, t));
  const clip = (v) => Math.min(255, Math.max(0, Math.trunc(v)));
  return [
    clip(-4.54 - s * (35.34 - s * (2381.73 - s * (6402.7 - s * (7024.72 - s * 2710.57))))),
    clip(32.49 + s * (170.73 + s * (52.82 - s * (131.46 - s * (176.58 - s * 67.37))))),
    clip(81.24 + s * (442.36 - s * (2482.43 - s * (6167.24 - s * (6614.94 - s * 2475.67))))),
  ];
}

// Pixel flags of an order map, as the service's flags array stores them, with the colour that
// marks them (the same as in the service's preview) and the words shown on hover.
export const FLAGS = [
  { bit: 1, rgb: [40, 40, 40], text: 'outside the specimen' },
  { bit: 2, rgb: [255, 255, 255], text: "beyond the calibration's range" },
  { bit: 4, rgb: [230, 0, 200], text: 'unreliable (too steep or washed out), no value' },
];

// The first flag set in `bits`, or undefined.
export const flagOf = (bits) => FLAGS.find((f) => bits & f.bit);

// Upper end of the false-colour scale for a map whose largest order is `maxOrder`: the next whole
// fringe, so that the bar's ticks fall on whole orders.
export function scaleTop(maxOrder) {
  return Number.isFinite(maxOrder) && maxOrder > 0 ? Math.ceil(maxOrder) : 1;
}

// A diverging scale for signed differences: blue (t = 0, most negative) through near-white
// (t = 0.5, zero) to red (t = 1, most positive); t in [0, 1].
export function diverging(t) {
  const s = Math.min(1, Math.max(0, t)) * 2 - 1;
  const blue = [33, 102, 172];
  const red = [178, 24, 43];
  const mid = [247, 247, 247];
  const end = s < 0 ? blue : red;
  const a = Math.abs(s);
  return mid.map((m, i) => Math.round(m + a * (end[i] - m)));
}

// A round upper end for a scale holding `value`: the first of 1, 1.2, 1.5, 2, 2.5, 3, 4, 5, 6,
// 8 or 10 × 10^k at or above it (so the scale's colours spread over most of it).
export function niceTop(value) {
  if (!(Number.isFinite(value) && value > 0)) return 1;
  const power = 10 ** Math.floor(Math.log10(value));
  return [1, 1.2, 1.5, 2, 2.5, 3, 4, 5, 6, 8, 10].map((m) => m * power).find((v) => v >= value * (1 - 1e-9));
}
