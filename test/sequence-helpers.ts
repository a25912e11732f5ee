/**
 * Shared helpers for the protocol and sequence tests: a protocol from a plain
 * object (over a small base), a phantom from JSON, and a serial simulation
 * with the pipeline's isochromat options and the grid reconstruction.
 */
import { parseProtocolObject, type Protocol } from "../src/protocol/index.js";
import { parsePhantom, type Phantom } from "../src/phantom/index.js";
import type { Sequence } from "../src/sequence/index.js";
import type { IsochromatOptions, IsochromatSet } from "../src/isochromats/index.js";
import type { ComplexVolume } from "../src/recon/reconstruct.js";
import { runPipeline } from "./helpers.js";

type Obj = Record<string, unknown>;

function merge(a: Obj, b: Obj): Obj {
  const out: Obj = { ...a };
  for (const [k, v] of Object.entries(b)) {
    const x = out[k];
    out[k] = x && v && typeof x === "object" && typeof v === "object" && !Array.isArray(v) ? merge(x as Obj, v as Obj) : v;
  }
  return out;
}

export const BASE: Obj = {
  sequence: "gre",
  field: "1.5 T",
  fov: { read: "16 cm", phase: "16 cm" },
  matrix: { read: 32, phase: 32 },
  slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" },
  bandwidth: "250 Hz/px",
  te: "5 ms",
  tr: "50 ms",
  flip: "90 deg",
  excitation: { shape: "hard", duration: "0.1 ms", steps: 20 },
  refocusing: { shape: "hard", duration: "0.2 ms", steps: 20 },
  oversampling: { read: 2, phase: 0 },
};

export function proto(over: Obj = {}): Protocol {
  return parseProtocolObject(merge(BASE, over) as never, "test.json");
}

export function tissue(t1: string, t2: string): Obj {
  return { pd: 1, t1, t2, t2star: t2, species: "water" };
}

export function phantom(json: Obj, field = 1.5): Phantom {
  return parsePhantom({ name: "test", ...json }, "phantom.json", field);
}

export interface SimResult {
  seq: Sequence;
  iso: IsochromatSet;
  kacq: ComplexVolume;
  kgrid: ComplexVolume;
  image: ComplexVolume;
  mag: Float64Array;
}

/**
 * The tests' one pipeline (helpers.ts runPipeline) at density 1 and one isochromat through the slice unless `iso` says
 * otherwise, raised where coherence pathways need it; with `exact`, iso.sliceCount is used as given (no automatic
 * raise), e.g. to show what a coarse grid does.
 */
export function simulate(p: Protocol, ph: Phantom, iso: Partial<IsochromatOptions> = {}, exact = false): SimResult {
  const r = runPipeline(p, ph, { density: 1, sliceCount: 1, sliceExtent: 1, ...iso }, [], { exact });
  return { seq: r.seq, iso: r.iso, kacq: r.kacq, kgrid: r.kgrid, image: r.image, mag: r.mag };
}

/** Magnitude-weighted centroid (pixels) of a [phase][read] plane along both axes, over values above `floor`·max. */
export function centroid(mag: Float64Array, nPhase: number, nRead: number, plane = 0, floor = 0): { phase: number; read: number } {
  const o = plane * nPhase * nRead;
  let max = 0;
  for (let i = 0; i < nPhase * nRead; i++) max = Math.max(max, mag[o + i]!);
  let s = 0, sy = 0, sx = 0;
  for (let y = 0; y < nPhase; y++) {
    for (let x = 0; x < nRead; x++) {
      const v = mag[o + y * nRead + x]!;
      if (v <= floor * max) continue;
      s += v;
      sy += v * y;
      sx += v * x;
    }
  }
  return { phase: sy / s, read: sx / s };
}

/** Half-maximum width (pixels, linear interpolation at both edges) of a profile around its peak region. */
export function halfMaxWidth(profile: ArrayLike<number>, level: number): number {
  const n = profile.length;
  let lo = -1, hi = -1;
  for (let i = 0; i < n; i++) if (profile[i]! >= level) { lo = i; break; }
  for (let i = n - 1; i >= 0; i--) if (profile[i]! >= level) { hi = i; break; }
  if (lo <= 0 || hi >= n - 1) return NaN;
  const left = lo - 1 + (level - profile[lo - 1]!) / (profile[lo]! - profile[lo - 1]!);
  const right = hi + (profile[hi]! - level) / (profile[hi]! - profile[hi + 1]!);
  return right - left;
}

/**
 * Sub-pixel shift of image b relative to image a along phase, by phase correlation (Kuglin & Hines 1975):
 * the cross-power spectrum along phase, C(m) = Σ_read FFT_y(b)·conj(FFT_y(a)), turns by −2π·Δ/N per
 * frequency step; Δ comes from the mean step arg Σ_m C(m+1)·conj(C(m)) over |m| ≤ N/4, which needs no
 * phase unwrapping (direct DFT, no library).
 */
export function phaseShift(a: { re: Float64Array; im: Float64Array }, b: { re: Float64Array; im: Float64Array }, nPhase: number, nRead: number): number {
  const M = Math.floor(nPhase / 4);
  const cr = new Float64Array(2 * M + 1), ci = new Float64Array(2 * M + 1);
  for (let m = -M; m <= M; m++) {
    for (let x = 0; x < nRead; x++) {
      let ar = 0, ai = 0, br = 0, bi = 0;
      for (let y = 0; y < nPhase; y++) {
        const th = (-2 * Math.PI * m * y) / nPhase, c = Math.cos(th), s = Math.sin(th);
        const i = y * nRead + x;
        ar += a.re[i]! * c - a.im[i]! * s; ai += a.re[i]! * s + a.im[i]! * c;
        br += b.re[i]! * c - b.im[i]! * s; bi += b.re[i]! * s + b.im[i]! * c;
      }
      cr[m + M] += br * ar + bi * ai;
      ci[m + M] += bi * ar - br * ai;
    }
  }
  let sr = 0, si = 0;
  for (let k = 0; k < 2 * M; k++) {
    sr += cr[k + 1]! * cr[k]! + ci[k + 1]! * ci[k]!;
    si += ci[k + 1]! * cr[k]! - cr[k + 1]! * ci[k]!;
  }
  return (-Math.atan2(si, sr) * nPhase) / (2 * Math.PI);
}
