/**
 * 8-bit greyscale PNG output with an automatic display window, and the
 * log-magnitude mapping used to show k-space.
 */
import { PNG } from "pngjs";

/** Default upper-window percentile of {@link encodeGrayPng}, in percent. */
export const DEFAULT_WINDOW_PERCENTILE = 99.5;

/** Relative floor of {@link logMagnitude}: |z| is measured in units of this fraction of max|z|. */
export const LOG_MAGNITUDE_FLOOR = 1e-3;

/**
 * The p-th percentile (p in percent, 0..100) of the finite values, with
 * linear interpolation between order statistics: for the sorted finite values
 * v[0..n−1], h = (n−1)·p/100 and the result is
 * v[⌊h⌋] + (h − ⌊h⌋)·(v[⌊h⌋+1] − v[⌊h⌋]) (definition 7 of R. J. Hyndman and
 * Y. Fan, "Sample quantiles in statistical packages", Am. Stat. 50 (1996)
 * 361–365; NumPy's default). NaN and ±∞ are ignored; NaN if none is left.
 * O(n) on a copy (selection, not a full sort: the same two order statistics
 * as the sorted copy, −0 ordered before +0 as TypedArray sort does); the
 * input is not modified.
 * @throws RangeError if p is outside 0..100.
 */
export function percentile(values: ArrayLike<number>, p: number): number {
  if (!(p >= 0 && p <= 100)) throw new RangeError(`percentile must be in 0..100, got ${p}`);
  if (p === 100) return largestFinite(values);
  const finite = new Float64Array(values.length);
  let n = 0;
  for (let i = 0; i < values.length; i++) {
    const x = values[i]!;
    if (Number.isFinite(x)) finite[n++] = x;
  }
  if (n === 0) return NaN;
  const v = finite.subarray(0, n);
  const h = ((n - 1) * p) / 100;
  const lo = Math.floor(h);
  if (lo >= n - 1) return signedZero(v, n - 1, largest(v));
  const a = signedZero(v, lo, select(v, lo));
  // after select, v[lo+1 …] holds the values at or above rank lo + 1: the next order statistic is their minimum
  let b = v[lo + 1]!;
  for (let i = lo + 2; i < n; i++) if (v[i]! < b) b = v[i]!;
  b = signedZero(v, lo + 1, b);
  return a + (h - lo) * (b - a);
}

/** The 100th percentile without a copy: the largest finite value, +0 over −0 as in the sorted copy; NaN if none. */
function largestFinite(values: ArrayLike<number>): number {
  let m = -Infinity, any = false;
  for (let i = 0; i < values.length; i++) {
    const x = values[i]!;
    if (!Number.isFinite(x)) continue;
    if (!any || x > m || (x === 0 && m === 0 && 1 / x > 0)) m = x;
    any = true;
  }
  return any ? m : NaN;
}

/** Largest value (± 0 alike). */
function largest(v: Float64Array): number {
  let m = v[0]!;
  for (let i = 1; i < v.length; i++) if (v[i]! > m) m = v[i]!;
  return m;
}

/**
 * Rearranges v so that v[k] holds the value of rank k (0-based, ascending)
 * with every value before it ≤ and every value after it ≥ (Hoare's FIND,
 * C. A. R. Hoare, Commun. ACM 4 (1961) 321, median-of-three pivots); returns
 * v[k]. Zeros of either sign compare equal here (see {@link signedZero}).
 */
function select(v: Float64Array, k: number): number {
  let l = 0, r = v.length - 1;
  while (r > l) {
    const m = (l + r) >>> 1;
    // median of three as the pivot
    let x = v[l]!, y = v[m]!, z = v[r]!;
    if (y < x) { const t = x; x = y; y = t; }
    if (z < y) { y = z < x ? x : z; }
    const pivot = y;
    let i = l, j = r;
    while (i <= j) {
      while (v[i]! < pivot) i++;
      while (v[j]! > pivot) j--;
      if (i <= j) {
        const t = v[i]!; v[i] = v[j]!; v[j] = t;
        i++;
        j--;
      }
    }
    if (k <= j) r = j;
    else if (k >= i) l = i;
    else break;
  }
  return v[k]!;
}

/** The value of rank k as TypedArray sort orders it: a zero there is −0 when rank k falls among the negative zeros. */
function signedZero(v: Float64Array, k: number, x: number): number {
  if (x !== 0) return x;
  let neg = 0, negZero = 0;
  for (let i = 0; i < v.length; i++) {
    const y = v[i]!;
    if (y < 0) neg++;
    else if (y === 0 && 1 / y < 0) negZero++;
  }
  return k >= neg && k < neg + negZero ? -0 : 0;
}

/** Window options of {@link encodeGrayPng}. */
export interface GrayPngOptions {
  /** Value shown black; default 0. */
  low?: number;
  /** Value shown white; default the `percentile`-th percentile of the values. */
  high?: number;
  /** Percentile (percent) that sets `high` when it is not given; default 99.5. */
  percentile?: number;
  /** More tEXt entries (keyword → Latin-1 text) besides {@link SIMULATED_NOTE}. */
  text?: Record<string, string>;
}

/** tEXt entry every PNG of isofold carries (keyword "Description", a keyword the PNG specification predefines). */
export const SIMULATED_NOTE =
  "Simulated image computed by isofold from a numeric phantom; not a scan of a person or object, not for diagnosis.";

let crcTable: Uint32Array | null = null;

/**
 * CRC-32 of the PNG specification (ISO/IEC 15948:2003 annex D; ITU-T V.42
 * polynomial 0xEDB88320, reflected, initial and final XOR 0xFFFFFFFF).
 */
export function crc32(bytes: Uint8Array, crc = 0): number {
  if (!crcTable) {
    crcTable = new Uint32Array(256);
    for (let n = 0; n < 256; n++) {
      let c = n;
      for (let k = 0; k < 8; k++) c = c & 1 ? 0xedb88320 ^ (c >>> 1) : c >>> 1;
      crcTable[n] = c >>> 0;
    }
  }
  let c = (crc ^ 0xffffffff) >>> 0;
  for (let i = 0; i < bytes.length; i++) c = crcTable[(c ^ bytes[i]!) & 0xff]! ^ (c >>> 8);
  return (c ^ 0xffffffff) >>> 0;
}

/**
 * Inserts tEXt chunks (keyword, NUL, text; both Latin-1) right after IHDR.
 * Keywords are 1–79 printable Latin-1 characters without leading, trailing
 * or double spaces (PNG specification 11.3.4.3).
 * @throws RangeError on a bad keyword, a character outside Latin-1 or a file that does not start with a PNG signature and IHDR.
 */
export function insertTextChunks(png: Uint8Array, entries: Record<string, string>): Uint8Array {
  const SIG = [137, 80, 78, 71, 13, 10, 26, 10];
  if (png.length < 33 || SIG.some((b, i) => png[i] !== b) || String.fromCharCode(...png.subarray(12, 16)) !== "IHDR") {
    throw new RangeError("insertTextChunks: not a PNG starting with IHDR");
  }
  const ihdrEnd = 8 + 12 + ((png[8]! << 24) | (png[9]! << 16) | (png[10]! << 8) | png[11]!);
  const chunks: Uint8Array[] = [];
  for (const [key, text] of Object.entries(entries)) {
    if (!/^[\x21-\x7e\xa1-\xff](?:[\x21-\x7e\xa1-\xff]| (?! ))*$/.test(key) || key.length > 79 || key.endsWith(" ")) {
      throw new RangeError(`insertTextChunks: bad keyword ${JSON.stringify(key)}`);
    }
    if (/[^\n\x20-\x7e\xa1-\xff]/.test(text)) throw new RangeError(`insertTextChunks: text of ${key} is not printable Latin-1`);
    const len = key.length + 1 + text.length;
    const c = new Uint8Array(12 + len);
    const dv = new DataView(c.buffer);
    dv.setUint32(0, len);
    const body = "tEXt" + key + "\0" + text;
    for (let i = 0; i < body.length; i++) c[4 + i] = body.charCodeAt(i);
    dv.setUint32(8 + len, crc32(c.subarray(4, 8 + len)));
    chunks.push(c);
  }
  const total = png.length + chunks.reduce((a, c) => a + c.length, 0);
  const out = new Uint8Array(total);
  out.set(png.subarray(0, ihdrEnd), 0);
  let o = ihdrEnd;
  for (const c of chunks) {
    out.set(c, o);
    o += c.length;
  }
  out.set(png.subarray(ihdrEnd), o);
  return out;
}

/** The largest finite value, −∞ if none (a loop of its own over a typed array: compiled once for every run). */
function finiteMax(values: Float64Array): number {
  let max = -Infinity;
  for (let i = 0; i < values.length; i++) {
    const x = values[i]!;
    if (Number.isFinite(x) && x > max) max = x;
  }
  return max;
}

/** grey[i] = round((values[i] − low)·gain) clamped to 0..255, NaN to 0 (typed arrays only: compiled once for every run). */
function greyLevels(values: Float64Array, low: number, gain: number, grey: Uint8Array): void {
  for (let i = 0; i < values.length; i++) {
    const g = Math.round((values[i]! - low) * gain);
    // NaN fails both comparisons and falls through to 0.
    grey[i] = g >= 255 ? 255 : g > 0 ? g : 0;
  }
}

/**
 * Encodes row-major values [height][width] as an 8-bit greyscale PNG
 * (colour type 0), row 0 at the top, column 0 at the left, with a tEXt
 * chunk saying it is simulated ({@link SIMULATED_NOTE}) and any `text`. Grey level
 * g = round(255·(v − low)/(high − low)) clamped to 0..255; NaN is black.
 * low defaults to 0; high defaults to the given percentile (99.5) of the
 * values, or their maximum if that is not above low; if the maximum is not
 * above low either (e.g. an all-zero image) the image is black.
 * Returns the file bytes and the window actually used.
 */
export function encodeGrayPng(
  values: Float64Array,
  width: number,
  height: number,
  opts: GrayPngOptions = {},
): { png: Uint8Array; low: number; high: number } {
  if (!Number.isSafeInteger(width) || width < 1 || !Number.isSafeInteger(height) || height < 1) {
    throw new RangeError(`PNG size must be positive integers, got ${width}×${height}`);
  }
  if (values.length !== width * height) {
    throw new RangeError(`PNG of ${width}×${height} needs ${width * height} values, got ${values.length}`);
  }
  const low = opts.low ?? 0;
  let high = opts.high ?? percentile(values, opts.percentile ?? DEFAULT_WINDOW_PERCENTILE);
  if (!(high > low)) high = finiteMax(values);
  const grey = Buffer.alloc(width * height);
  if (high > low && Number.isFinite(high) && Number.isFinite(low)) greyLevels(values, low, 255 / (high - low), grey);
  const png = new PNG({ width, height, colorType: 0, inputColorType: 0, inputHasAlpha: false });
  png.data = grey;
  // one row filter for every row (Sub: each byte minus its left neighbour, PNG specification 9.2) instead of
  // pngjs's per-row choice among five: about 4× faster to write, and as small or smaller on smooth images
  const out = PNG.sync.write(png, { colorType: 0, inputColorType: 0, inputHasAlpha: false, filterType: 1 });
  const bytes = insertTextChunks(new Uint8Array(out.buffer, out.byteOffset, out.byteLength), { Description: SIMULATED_NOTE, ...opts.text });
  return { png: bytes, low, high };
}

/**
 * Log-magnitude for display of k-space:
 *   out[i] = log10(1 + |z_i| / (1e-3 · max|z|)),
 * so 0 maps to 0 and the peak to log10(1001) ≈ 3.0: the three decades below
 * the peak are shown logarithmically, weaker values fade almost linearly to 0.
 * All zeros give zeros.
 * @param out optional output array of the same length (returned).
 */
export function logMagnitude(re: Float64Array, im: Float64Array, out = new Float64Array(re.length)): Float64Array {
  const n = re.length;
  if (im.length !== n || out.length !== n) throw new RangeError("logMagnitude: re, im and out must have equal lengths");
  let max = 0;
  for (let i = 0; i < n; i++) {
    const a = Math.sqrt(re[i]! * re[i]! + im[i]! * im[i]!);
    out[i] = a;
    if (a > max) max = a;
  }
  if (max === 0) {
    out.fill(0);
    return out;
  }
  const inv = 1 / (LOG_MAGNITUDE_FLOOR * max);
  for (let i = 0; i < n; i++) out[i] = Math.log10(1 + out[i]! * inv);
  return out;
}
