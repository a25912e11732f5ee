/**
 * A-posteriori check of the through-slice sampling: the sequence is run on one
 * probe column (in-plane centre, each tissue on resonance plus the global
 * offset) twice, on the chosen through-slice grid and on the same grid shifted
 * by half a step. A converged grid gives the same signal (both are midpoint
 * rules of one smooth integral); an aliased pathway (sequence/pathways.ts)
 * enters the two with opposite signs for odd alias orders, so the relative
 * difference measures it. Cost: 2 × sliceCount × tissues isochromats.
 */
import type { Axes } from "../protocol/geometry.js";
import type { Sequence } from "../sequence/types.js";
import { probeColumn } from "../isochromats/index.js";
import { simulateSerial } from "./index.js";
import { HAS_SHARED_MEMORY } from "./plan.js";

export interface SliceConvergence {
  /** ‖s − s_shifted‖ / ‖s‖ over every ADC sample of the probe. */
  relativeChange: number;
  tolerance: number;
  converged: boolean;
  /** Tissues probed. */
  tissues: number;
}

/** Default tolerance of the half-step check (relative L2 change of the probe signal); the centre probe overstates the image-wide error about 2–3× (test/through-slice.test.ts). */
export const SLICE_CONVERGENCE_TOLERANCE = 0.02;

export function checkSliceConvergence(
  seq: Sequence,
  tissues: { pd: number; t1: number; t2: number }[],
  geo: ConvergenceGeometry,
  sliceCount: number, sliceExtent: number, tolerance = SLICE_CONVERGENCE_TOLERANCE,
): SliceConvergence {
  const probe = probeTissues(tissues);
  const rel = probe.length === 0 ? 0 : probeChange(seq, probe, geo, sliceCount, sliceExtent);
  return { relativeChange: rel, tolerance, converged: rel <= tolerance, tissues: probe.length };
}

/** Where the probe column lies: the slice's axes, thickness and position (m), and the global offset (Hz). */
export interface ConvergenceGeometry { axes: Axes; thickness: number; position: number; offsetHz: number }

/** Up to four tissues of distinct relaxation, largest proton density first: the check must stay cheap. */
function probeTissues(tissues: { pd: number; t1: number; t2: number }[]): { pd: number; t1: number; t2: number }[] {
  const seen = new Set<string>();
  return [...tissues].filter((t) => t.pd > 0).sort((a, b) => b.pd - a.pd).filter((t) => {
    const k = `${t.t1}/${t.t2}`;
    if (seen.has(k)) return false;
    seen.add(k);
    return true;
  }).slice(0, 4);
}

/** ‖s − s_shifted‖ / ‖s‖ of the probe column on the grid and on the grid shifted by half a step. */
function probeChange(seq: Sequence, probe: { pd: number; t1: number; t2: number }[], geo: ConvergenceGeometry, sliceCount: number, sliceExtent: number): number {
  const run = (shift: number) => {
    const iso = probeColumn(probe, geo.axes, geo.thickness, geo.position, sliceCount, sliceExtent, geo.offsetHz, shift);
    return simulateSerial(seq, iso, { receiverFilter: false }).kspace;
  };
  const a = run(0), b = run(0.5);
  let num = 0, den = 0;
  for (let i = 0; i < a.re.length; i++) {
    const dr = a.re[i]! - b.re[i]!, di = a.im[i]! - b.im[i]!;
    num += dr * dr + di * di;
    den += a.re[i]! * a.re[i]! + a.im[i]! * a.im[i]!;
  }
  return den > 0 ? Math.sqrt(num / den) : 0;
}

/**
 * The check for another thread (startSliceConvergence posts it, the fast
 * operator's helper thread runs it: runConvergenceJob). `ctrl[0]`: 0 posted,
 * 1 the helper computes, 2 done (the relative change in out[0]), 3 taken back
 * by the posting thread, 4 the helper failed.
 */
export interface ConvergenceJob {
  seq: Sequence; probe: { pd: number; t1: number; t2: number }[]; geo: ConvergenceGeometry; sliceCount: number; sliceExtent: number;
  out: Float64Array; ctrl: Int32Array;
}

let offload: ((job: ConvergenceJob) => boolean) | null = null;

/** Sets where the check may run besides this thread (Node: the fast operator's helper thread while it runs; engine/fast-node.ts); `f` returns whether it took the job. */
export function setConvergenceOffload(f: ((job: ConvergenceJob) => boolean) | null): void {
  offload = f;
}

/** The longest the posting thread waits for a check the helper has started before it computes the check itself (ms). */
const OFFLOAD_WAIT_MS = 10_000;

/**
 * Starts the check of {@link checkSliceConvergence}: on the helper thread
 * where one runs (shared memory), so that it overlaps this thread's sampling
 * and engine run; `result()` then waits for it, or takes it back and computes
 * it here if the helper has not begun. Without a helper, `result()` computes
 * it. The same arithmetic on either thread: the same result, bit for bit.
 */
export function startSliceConvergence(
  seq: Sequence, tissues: { pd: number; t1: number; t2: number }[], geo: ConvergenceGeometry,
  sliceCount: number, sliceExtent: number, tolerance = SLICE_CONVERGENCE_TOLERANCE,
): { result: () => SliceConvergence } {
  const probe = probeTissues(tissues);
  const done = (rel: number): SliceConvergence => ({ relativeChange: rel, tolerance, converged: rel <= tolerance, tissues: probe.length });
  const here = () => done(probe.length === 0 ? 0 : probeChange(seq, probe, geo, sliceCount, sliceExtent));
  let job: ConvergenceJob | null = null;
  if (offload && probe.length > 0 && HAS_SHARED_MEMORY) {
    const j: ConvergenceJob = {
      seq, probe, geo, sliceCount, sliceExtent,
      out: new Float64Array(new SharedArrayBuffer(8)), ctrl: new Int32Array(new SharedArrayBuffer(4)),
    };
    try {
      if (offload(j)) job = j;
    } catch {
      job = null;
    }
  }
  let r: SliceConvergence | null = null;
  return {
    result: () => {
      if (r) return r;
      if (!job || Atomics.compareExchange(job.ctrl, 0, 0, 3) === 0) return (r = here());
      // the helper has begun (1) or finished (2, or 4 failed): wait for it, within a bound
      const until = Date.now() + OFFLOAD_WAIT_MS;
      while (Atomics.load(job.ctrl, 0) === 1 && Date.now() < until) Atomics.wait(job.ctrl, 0, 1, 50);
      return (r = Atomics.load(job.ctrl, 0) === 2 ? done(job.out[0]!) : here());
    },
  };
}

/** The helper's side of a ConvergenceJob: computes it unless the posting thread took it back first. */
export function runConvergenceJob(job: ConvergenceJob): void {
  if (Atomics.compareExchange(job.ctrl, 0, 0, 1) !== 0) return;
  let state = 4;
  try {
    job.out[0] = probeChange(job.seq, job.probe, job.geo, job.sliceCount, job.sliceExtent);
    state = 2;
  } finally {
    Atomics.store(job.ctrl, 0, state);
    Atomics.notify(job.ctrl, 0);
  }
}
