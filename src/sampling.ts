/**
 * How the isochromat grid is chosen for a protocol: the through-slice count
 * from the coherence pathways that reach an ADC, the in-plane sampling
 * limits, the 3D slab coverage. Pure functions of the protocol, its built
 * sequence and the phantom (used by the library's prepareSimulation and by
 * `isofold validate`).
 */
import { logicalAxes, type Protocol } from "./protocol/index.js";
import { phantomBounds, type Phantom } from "./phantom/index.js";
import { aliasFreeCount, buildSequence, pathwayMoments, pulseProfileReach, sequenceDefinition, type Sequence } from "./sequence/index.js";
import type { IsochromatOptions } from "./isochromats/index.js";

/**
 * Pathway order followed when choosing the through-slice count
 * (sequence/pathways.ts): twice the refocusing pulses per TR, at least 4
 * (pathways carried across TRs), at most 8 (cost). Measured on
 * test/through-slice.test.ts: a 4-echo train converges to < 0.1 % at order 8,
 * to about 1 % at order 4.
 */
export function pathwayOrder(seq: Sequence): number {
  let exc = 0, ref = 0;
  for (const b of seq.blocks) {
    if (b.kind !== "rf") continue;
    if (b.pulse === 0) exc++;
    else if (seq.pulses[b.pulse]!.flip > Math.PI / 2 + 1e-9) ref++;
  }
  const perTr = exc > 0 ? Math.round(ref / exc) : 0;
  return Math.min(8, Math.max(4, 2 * perTr));
}

/**
 * Reach (cycles per thickness) of the slice profiles' spectra: an aliased
 * pathway copy closer to zero than this still adds signal. Three times the
 * largest pulse time-bandwidth product (the profile's transition band is
 * thickness/tbw wide), at least 4; found on the convergence tests of
 * test/through-slice.test.ts (SE, RARE, bSSFP, tbw 2–8).
 */
export function profileReach(maxPulseTbw: number): number {
  return Math.max(4, 3 * maxPulseTbw);
}

/**
 * Isochromat options for a protocol. A coherence pathway that reaches an ADC
 * with a through-slice moment of K cycles per thickness (crushers, spoilers,
 * the refocusing pulses' own slice-select lobes, higher orders of echo
 * trains: sequence/pathways.ts) is only simulated faithfully when the
 * through-slice grid does not alias it back near zero: with ρ isochromats per
 * thickness the grid sums it as if it had the moments K − m·ρ. The count is
 * the smallest that keeps every such copy (m ≠ 0) of every pathway moment
 * farther than the profile reach from zero (aliasFreeCount), and at least
 * the requested count.
 * 3D: the through-slab grid covers M slice-encoding steps (the N of the slab plus a
 * margin of ⌈N/8⌉ on each side for the slab profile's skirts, which then wrap
 * along slice-encoding steps as on a scanner), at least `density` isochromats per
 * slice-encoding step (and 2K + 1 for a spoiler moment K per step), weighted per
 * slice-encoding step thickness.
 */
export function isoOptionsFor(p: Protocol, iso: IsochromatOptions, seq?: Sequence, slabSteps?: number): IsochromatOptions & { pathwayMoment: number; pathwayOrder: number } {
  const s = seq ?? buildSequence(p);
  const order = pathwayOrder(s);
  const pm = pathwayMoments(s, p.slice.thickness, order);
  const K = pm.maxMoment;
  if (!sequenceDefinition(p.sequence).threeD) {
    const moments = pm.moments.filter((k) => k > 0.5);
    const n = moments.length ? aliasFreeCount(moments, profileReach(pm.maxPulseTbw), iso.sliceExtent, iso.sliceCount) : iso.sliceCount;
    return { ...iso, sliceCount: Math.max(iso.sliceCount, n), pathwayMoment: K, pathwayOrder: order };
  }
  const n = p.matrix.slice;
  const m = slabSteps ?? n + 2 * Math.ceil(n / 8);
  const per = Math.max(iso.density, Math.ceil(2 * K + 1 - 1e-9));
  return { ...iso, sliceCount: m * per, sliceExtent: m, pathwayMoment: K, pathwayOrder: order };
}

/** How the isochromat grid was chosen, for report.json. */
export interface IsoSampling {
  sliceCount: number;
  sliceExtent: number;
  /** Largest through-slice moment (cycles per thickness) of a followed pathway at an ADC, and the order followed. */
  pathwayMoment: number;
  pathwayOrder: number;
  notes: string[];
  convergence: { relativeChange: number; tolerance: number; converged: boolean; method: string } | null;
}

/**
 * In-plane sampling limits (isochromats/IsoGeometry): along phase every
 * shape's full extent (no anti-alias filter acts on phase encoding); along
 * read, with the receiver filter, out to the sampled FOV (os·FOV, twice the
 * filter's Nyquist edge, leaving room for off-resonance of up to
 * ½·N·os·BW_px Hz), without it everywhere. 2D shapes on a tilted plane are
 * unbounded in-plane: they are cut at 1.5 × the acquired FOV, with a warning.
 */
export function sampledLimits(p: Protocol): { clipRead: number; clipPhase: number; unboundedRead: number; unboundedPhase: number; readStopBand: boolean } {
  const readFov = p.fov.read * p.oversampling.read;
  return {
    clipRead: p.receiverFilter ? readFov : Infinity,
    clipPhase: Infinity,
    unboundedRead: 1.5 * readFov,
    unboundedPhase: 1.5 * p.fov.phase * (1 + p.oversampling.phase),
    readStopBand: p.receiverFilter,
  };
}

/**
 * 3D: slice-encoding steps the through-slab grid covers, at least the slab plus
 * ⌈N/8⌉ steps each side, and out to every shape's extent along the slab
 * normal where the excitation still reaches (small-tip profile ≥ 1e-3 of its
 * centre; all of it for a non-selective pulse), so tissue outside the slab
 * wraps along slice encoding as on a scanner. Same parity as N.
 */
export function slabCoverage(p: Protocol, seq: Sequence, ph: Phantom): { steps: number; note?: string; warning?: string } {
  const n = p.matrix.slice, thk = p.slice.thickness;
  const m0 = n + 2 * Math.ceil(n / 8);
  const ax = logicalAxes(p);
  const b = phantomBounds(ph);
  let lo = 0, hi = 0;
  for (let k = 0; k < 3; k++) {
    const d = ax.slice[k]!;
    if (d === 0) continue;
    lo += Math.min(b.min[k]! * d, b.max[k]! * d);
    hi += Math.max(b.min[k]! * d, b.max[k]! * d);
  }
  const pos = p.slice.position;
  const objectHalf = Math.max(Math.abs(lo - pos), Math.abs(hi - pos));
  const exc = seq.pulses[0]!;
  const cap = 8 * m0 * thk; // beyond this a 2D (infinite) phantom is cut
  const reach = pulseProfileReach(exc, pos, Math.min(objectHalf, cap));
  const half = Math.min(objectHalf, reach, cap);
  const need = Math.ceil(((2 * half) / thk - n) / 2);
  const steps = Math.max(m0, n + 2 * Math.max(0, need));
  const cm = (x: number) => `${(x * 100).toFixed(1)} cm`;
  const out: { steps: number; note?: string; warning?: string } = { steps };
  if (steps > m0) out.note = `3D: the through-slab grid covers ${steps} slice-encoding steps (±${cm((steps * thk) / 2)}) so excited tissue outside the slab wraps along slice encoding`;
  if (objectHalf > (steps * thk) / 2 + 1e-9 && reach > (steps * thk) / 2) {
    out.warning = `3D: the phantom reaches ${Number.isFinite(objectHalf) ? cm(objectHalf) : "infinitely far (2D shapes)"} from the slab centre along the slab normal, where the ` +
      `${exc.gradient === 0 ? "non-selective " : ""}excitation still acts, but is sampled only within ±${cm((steps * thk) / 2)}: tissue beyond that does not wrap into the image; use shapes of finite length`;
  }
  return out;
}


/**
 * 2D: a non-selective (hard) excitation, not confined by a selective refocusing pulse, excites every
 * tissue along the slice normal, but the isochromats cover only sliceExtent slice thicknesses around each
 * slice. Where the phantom reaches beyond that span, the image is the projection over the span alone and
 * its amplitude grows with --slice-extent (each isochromat carries Δw/thickness of its voxel): a warning
 * that says so. Null where the excitation is selective or the span holds the whole phantom.
 */
export function nonSelectiveRemark(p: Protocol, ph: Phantom, sliceExtent: number, positions: readonly number[]): string | null {
  const def = sequenceDefinition(p.sequence);
  if (def.threeD || p.excitation.shape !== "hard") return null;
  if (def.refocuses(p) && p.refocusing.shape !== "hard") return null;
  const dir = logicalAxes(p).slice;
  const b = phantomBounds(ph);
  let lo = 0, hi = 0;
  for (let k = 0; k < 3; k++) {
    const d = dir[k]!;
    if (d === 0) continue;
    lo += Math.min(b.min[k]! * d, b.max[k]! * d);
    hi += Math.max(b.min[k]! * d, b.max[k]! * d);
  }
  const half = (sliceExtent * p.slice.thickness) / 2;
  const covered = positions.every((w) => lo >= w - half - 1e-12 && hi <= w + half + 1e-12);
  if (covered) return null;
  const mm = (m: number) => `${(m * 1e3).toFixed(1)} mm`;
  const reach = Number.isFinite(lo) && Number.isFinite(hi) ? `${mm(lo)} … ${mm(hi)}` : "without end (a 2D shape is infinite along z)";
  return `the excitation is non-selective (excitation.shape hard): it excites the phantom all along the slice normal (${reach}), ` +
    `but the isochromats cover only ±${mm(half)} around the slice (--slice-extent ${sliceExtent} × ${mm(p.slice.thickness)}); ` +
    `the image is the projection over that span, about ${sliceExtent.toPrecision(3)} times the signal of one slice thickness, and changes with --slice-extent; ` +
    `use a selective pulse (excitation.shape sinc) for a slice`;
}
