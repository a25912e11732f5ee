/**
 * Part of a run's RF maps filled on the fast operator's helper thread
 * (fast.ts fillRfMapsShared posts the job, fast-worker.ts runs it): a module
 * of its own, so the helper loads no more than it needs.
 */
import { fillRfMapsOf, type RfSpec } from "./plan.js";

/**
 * The classes c0 … c1−1 of a run's RF maps, for the helper thread: the plan's parts that fillRfMaps reads
 * (class arrays and maps in shared memory) and a control word (0 posted, 1 the helper fills, 2 filled,
 * 3 taken back by the main thread, 4 the helper failed).
 */
export interface RfJob {
  rf: RfSpec; maps: Float64Array; classes: number; wasm: boolean; c0: number; c1: number; ctrl: Int32Array;
}

/** The helper's side of an RfJob: fills its classes unless the main thread took them back first. */
export function runRfJob(job: RfJob): void {
  if (Atomics.compareExchange(job.ctrl, 0, 0, 1) !== 0) return;
  try {
    fillRfMapsOf(job.rf, job.maps, job.classes, job.wasm, job.c0, job.c1);
    Atomics.store(job.ctrl, 0, 2);
  } catch (e) {
    Atomics.store(job.ctrl, 0, 4);
    throw e;
  } finally {
    Atomics.notify(job.ctrl, 0);
  }
}
