/**
 * Engine fast paths against slow direct computations: the readout recurrence
 * against per-sample exponentials, numeric tuple hashing against string keys,
 * the whole chunk runner (RF classes, readout groups, receiver filter, coil
 * sensitivities) against a per-isochromat Bloch simulation written from the
 * Bloch equations, and the worker pool against the serial run (bitwise).
 */
import { relL2 } from "./helpers.js";
import { describe, expect, test } from "vitest";
import { GAMMA, GAMMA_BAR } from "../src/constants.js";
import { prepare } from "../src/cli/pipeline.js";
import {
  BLOCK_CHUNKS, ChunkScratch, blockCount, f64Words, makePlan, readoutRecurrence, receiverFilter, runChunk,
  PARALLEL_RF_CLASSES, readoutRecurrenceFast, rfAffine, rfAffineMany, wasmRfKernel, serialExecutor, shardBlocks, simulateParallel, simulateSerial, simulateWith, TupleIndex, wasmKernel,
} from "../src/engine/node.js";
import { defaultIsochromatOptions, type IsochromatSet } from "../src/isochromats/index.js";
import type { Sequence } from "../src/sequence/types.js";

/** Deterministic uniform numbers in [0, 1) (a 32-bit linear congruential generator, fixed seed). */
function rng(seed: number): () => number {
  let s = seed >>> 0;
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0;
    return s / 2 ** 32;
  };
}

describe("readout kernels", () => {
  test("the SIMD kernel is available here (else the scalar fallback runs and this check would be void)", () => {
    expect(wasmKernel()).not.toBeNull();
  });

  test.each([["scalar", readoutRecurrence], ["wasm SIMD", readoutRecurrenceFast]] as const)("%s kernel matches the direct sum s[j] = Σ z·ρ^j·exp(i·j·θ) within 1e-10 relative", (_name, kernel) => {
    // Direct evaluation: a = ρ·exp(iθ), so a^j = ρ^j·exp(i·j·θ), with the accumulated phase j·θ (closed form of the power).
    const r = rng(7);
    for (const [groups, n] of [[1, 256], [3, 255], [4, 1], [7, 2], [8, 256], [13, 97], [64, 512]] as const) {
      const zr = new Float64Array(groups), zi = new Float64Array(groups), ar = new Float64Array(groups), ai = new Float64Array(groups);
      const rho = new Float64Array(groups), th = new Float64Array(groups);
      for (let g = 0; g < groups; g++) {
        zr[g] = r() - 0.5;
        zi[g] = r() - 0.5;
        rho[g] = Math.exp(-r() * 1e-2);
        th[g] = (r() - 0.5) * 2 * Math.PI;
        ar[g] = rho[g]! * Math.cos(th[g]!);
        ai[g] = rho[g]! * Math.sin(th[g]!);
      }
      const sr = new Float64Array(n), si = new Float64Array(n);
      kernel(sr, si, n, zr, zi, ar, ai, groups);
      const dr = new Float64Array(n), di = new Float64Array(n);
      for (let j = 0; j < n; j++) {
        for (let g = 0; g < groups; g++) {
          const m = rho[g]! ** j, p = j * th[g]!;
          const c = m * Math.cos(p), s = m * Math.sin(p);
          dr[j] = dr[j]! + zr[g]! * c - zi[g]! * s;
          di[j] = di[j]! + zr[g]! * s + zi[g]! * c;
        }
      }
      expect(relL2(sr, si, dr, di)).toBeLessThan(1e-10);
    }
  });
});

describe("RF maps", () => {
  test("the SIMD batch equals scalar rfAffine within 1e-12 (small and large step angles, on and off resonance)", () => {
    // Oracle: rfAffine, itself checked against the direct Bloch simulation below.
    expect(wasmRfKernel()).not.toBeNull();
    const steps = 120, dt = 1e-5, b1re = new Float64Array(steps), b1im = new Float64Array(steps);
    for (let s = 0; s < steps; s++) {
      const x = ((s - steps / 2 + 0.5) / 15) * Math.PI;
      b1re[s] = (2e-5 * Math.sin(x)) / x;
      b1im[s] = s % 5 === 0 ? 3e-6 : 0;
    }
    b1re[0] = 0;
    // offsets up to 40 kHz: step angles past 1 rad take the scalar path inside the batch
    const fs = [0, 0, 125.5, -3000, 40000, 7, -40000, 1e3, 2e3];
    const count = fs.length, r1 = fs.map((_, k) => 1 + k), r2 = fs.map((_, k) => 10 + 3 * k);
    const a = new Float64Array(12 * count), b = new Float64Array(12 * count);
    for (let k = 0; k < count; k++) rfAffine(a, 12 * k, b1re, b1im, dt, GAMMA, fs[k]!, r1[k]!, r2[k]!);
    rfAffineMany(b, 0, count, fs, r1, r2, b1re, b1im, dt, GAMMA);
    for (let q = 0; q < a.length; q++) expect(Math.abs(a[q]! - b[q]!)).toBeLessThan(1e-12);
    // each class's bits do not depend on its partner: the classes one at a time give the same bytes
    const c1 = new Float64Array(12 * count);
    for (let k = 0; k < count; k++) rfAffineMany(c1, 12 * k, 1, [fs[k]!], [r1[k]!], [r2[k]!], b1re, b1im, dt, GAMMA);
    expect(Buffer.from(c1.buffer).equals(Buffer.from(b.buffer))).toBe(true);
  });
});

describe("TupleIndex", () => {
  test("gives the same ids as a Map over string keys of the same tuples (first-seen order)", () => {
    const r = rng(3);
    const idx = new TupleIndex(5, 4);
    const map = new Map<string, number>();
    const key = new Uint32Array(5);
    const values = [0, -0, 1.5, 1e-300, -7.25, 3];
    for (let i = 0; i < 20000; i++) {
      const a = Math.floor(r() * 40), b = values[Math.floor(r() * values.length)]!, c = values[Math.floor(r() * values.length)]!;
      key[0] = a;
      f64Words(b, key, 1);
      f64Words(c, key, 3);
      // Object.is separates −0 from +0, as bit comparison does.
      const sk = `${a}|${Object.is(b, -0) ? "-0" : b}|${Object.is(c, -0) ? "-0" : c}`;
      let want = map.get(sk);
      if (want === undefined) {
        want = map.size;
        map.set(sk, want);
      }
      expect(idx.id(key)).toBe(want);
    }
    expect(idx.size).toBe(map.size);
  });
});

/**
 * Direct per-isochromat Bloch simulation of the block list (no classes, no
 * groups, no tables, no affine maps): RF by relax ½dt / rotate the vector
 * about Ω = −γ(B1x, B1y, 2πf/γ) by |Ω|dt (Rodrigues) / relax ½dt per step;
 * free blocks by Mxy·exp(−i2π(γ̄A·r + Δf·t))·exp(−t/T2); readout samples by
 * the exponential of the accumulated phase at each sample time. Adds the
 * k-space [coil][row][read] (sensitivity S per coil if given).
 */
function directBloch(seq: Sequence, iso: IsochromatSet, filter: boolean, coils: number, sens: Float64Array | null): { re: Float64Array; im: Float64Array } {
  const rows = seq.kspace.slice * seq.kspace.phase, read = seq.kspace.read;
  const re = new Float64Array(coils * rows * read), im = new Float64Array(coils * rows * read);
  for (let i = 0; i < iso.count; i++) {
    const u = iso.uGrid[iso.iu[i]!]!, v = iso.vGrid[iso.iv[i]!]!, w = iso.wGrid[iso.iw[i]!]!;
    const m0 = iso.m0[i]!, r1 = iso.r1[i]!, r2 = iso.r2[i]!, df = iso.df[i]!;
    let mx = 0, my = 0, mz = m0;
    const free = (t: number, a0: number, a1: number, a2: number) => {
      const ph = -2 * Math.PI * (GAMMA_BAR * (a0 * u + a1 * v + a2 * w) + df * t);
      const e2 = Math.exp(-t * r2), c = Math.cos(ph) * e2, s = Math.sin(ph) * e2;
      const nx = mx * c - my * s;
      my = mx * s + my * c;
      mx = nx;
      const e1 = Math.exp(-t * r1);
      mz = mz * e1 + m0 * (1 - e1);
    };
    for (const b of seq.blocks) {
      if (b.kind === "rf") {
        const p = seq.pulses[b.pulse]!;
        const f = GAMMA_BAR * p.gradient * w + df;
        const cp = Math.cos(b.phase), sp = Math.sin(b.phase);
        const e2h = Math.exp(-r2 * p.dt / 2), e1h = Math.exp(-r1 * p.dt / 2);
        const half = () => {
          mx *= e2h;
          my *= e2h;
          mz = mz * e1h + m0 * (1 - e1h);
        };
        for (let s = 0; s < p.b1re.length; s++) {
          half();
          const bx = p.b1re[s]! * cp - p.b1im[s]! * sp, by = p.b1re[s]! * sp + p.b1im[s]! * cp;
          const ox = -GAMMA * bx, oy = -GAMMA * by, oz = -2 * Math.PI * f;
          const om = Math.sqrt(ox * ox + oy * oy + oz * oz);
          if (om > 0) {
            const kx = ox / om, ky = oy / om, kz = oz / om, th = om * p.dt;
            const c = Math.cos(th), sn = Math.sin(th), dot = kx * mx + ky * my + kz * mz;
            const cx = ky * mz - kz * my, cy = kz * mx - kx * mz, cz = kx * my - ky * mx;
            const nx = mx * c + cx * sn + kx * dot * (1 - c), ny = my * c + cy * sn + ky * dot * (1 - c);
            mz = mz * c + cz * sn + kz * dot * (1 - c);
            mx = nx;
            my = ny;
          }
          half();
        }
      } else if (b.kind === "free") {
        free(b.duration, b.area[0], b.area[1], b.area[2]);
      } else if (b.kind === "spoil") {
        mx = 0;
        my = 0;
      } else {
        const fRead = GAMMA_BAR * b.grad[0] * u;
        const wf = filter ? receiverFilter(fRead + df, 1 / b.dwell) : 1;
        const rate = GAMMA_BAR * (b.grad[0] * u + b.grad[1] * v + b.grad[2] * w) + df;
        const cr = b.weight * Math.cos(b.phase), ci = -b.weight * Math.sin(b.phase);
        for (let j = 0; j < b.samples; j++) {
          const t = j * b.dwell, ph = -2 * Math.PI * rate * t, e2 = Math.exp(-t * r2) * wf;
          const sx = (mx * Math.cos(ph) - my * Math.sin(ph)) * e2, sy = (mx * Math.sin(ph) + my * Math.cos(ph)) * e2;
          const qr = sx * cr - sy * ci, qi = sx * ci + sy * cr;
          for (let q = 0; q < coils; q++) {
            const o = (q * rows + b.row) * read + j;
            const s0 = sens ? sens[2 * (q * iso.count + i)]! : 1, s1 = sens ? sens[2 * (q * iso.count + i) + 1]! : 0;
            re[o] = re[o]! + (qr * s0 - qi * s1);
            im[o] = im[o]! + (qr * s1 + qi * s0);
          }
        }
        const T = b.samples * b.dwell;
        free(T, b.grad[0] * T, b.grad[1] * T, b.grad[2] * T);
      }
    }
  }
  return { re, im };
}

/**
 * A small case: the two-bottle phantom (water and oil: several spectral peaks, so several Δf per column).
 * 8×8, one dummy scan and 50 steps per pulse by default: the direct oracle costs isochromats × TRs ×
 * pulse steps, so this keeps every oracle case to a few seconds on a loaded 2-core machine (16×16
 * with 200-step pulses took 45–80 s for the spin echo) while still covering RF classes, readout
 * groups, two pulses per TR and the approach to the steady state. Engine and oracle play the same
 * pulse samples, so the step count changes what is compared, not what is proved.
 */
function smallCase(sets: string[] = [], protocol = "gre-demo-1.5t", density = 1) {
  return prepare({
    phantom: "phantoms/two-bottle.json", protocol,
    sets: ["matrix.read=8", "matrix.phase=8", "dummyScans=1", "excitation.steps=50", "refocusing.steps=50", ...sets],
    out: "/tmp/unused", seed: 1, iso: { ...defaultIsochromatOptions(), density, sliceCount: 3, sliceExtent: 3, fatModel: "multi" }, workers: 1,
  });
}

describe("chunk runner", () => {
  test("k-space equals a direct per-isochromat Bloch simulation within 1e-9 relative (RF classes, readout groups, filter)", () => {
    const p = smallCase();
    const { kspace } = simulateSerial(p.seq, p.iso, { receiverFilter: true, readout: "direct" });
    const d = directBloch(p.seq, p.iso, true, 1, null);
    expect(relL2(kspace.re, kspace.im, d.re, d.im)).toBeLessThan(1e-9);
    // the fast readout operator: within its tolerance of the per-isochromat Bloch simulation
    const f = simulateSerial(p.seq, p.iso, { receiverFilter: true, readout: "fast" });
    expect(f.readout.operator).toBe("fast");
    expect(relL2(f.kspace.re, f.kspace.im, d.re, d.im)).toBeLessThan(1e-6);
  }, 60_000);

  test.each([["spoiling=rf"], ["spoiling=none"]])("GRE with %s (RF phases, no ideal spoil): k-space equals the direct simulation within 1e-9 relative", (set) => {
    const p = smallCase([set]);
    const { kspace } = simulateSerial(p.seq, p.iso, { receiverFilter: true });
    const d = directBloch(p.seq, p.iso, true, 1, null);
    expect(relL2(kspace.re, kspace.im, d.re, d.im)).toBeLessThan(1e-9);
  }, 60_000);

  test("spin echo (two pulses per TR): k-space equals the direct per-isochromat Bloch simulation within 1e-9 relative", () => {
    // 32 steps per pulse (the later sets override the 50 of smallCase): the oracle's cost is
    // isochromats × TRs × pulse steps, and this case plays two pulses per TR
    const p = smallCase(["excitation.steps=32", "refocusing.steps=32"], "se-t2-1.5t");
    expect(p.seq.pulses.length).toBe(2);
    expect(p.seq.pulses.map((q) => q.b1re.length)).toEqual([32, 32]);
    const { kspace, plan } = simulateSerial(p.seq, p.iso, { receiverFilter: true, readout: "direct" });
    const d = directBloch(p.seq, p.iso, true, 1, null);
    expect(relL2(kspace.re, kspace.im, d.re, d.im)).toBeLessThan(1e-9);
    // no in-plane moment at the refocusing pulse: the state at every pulse per RF class (engine/plan.ts balancedInPlane),
    // and the fast operator from it (auto's choice here) within its tolerance of the same oracle
    expect(plan.classState).toBe(true);
    const f = simulateSerial(p.seq, p.iso, { receiverFilter: true, readout: "fast" });
    expect(f.readout.operator).toBe("fast");
    expect(relL2(f.kspace.re, f.kspace.im, d.re, d.im)).toBeLessThan(1e-6);
  }, 60_000);

  test("with two coils and random sensitivities, each coil equals the direct simulation within 1e-9 relative", () => {
    const p = smallCase(["receiverFilter=false"]);
    const r = rng(11);
    const coils = 2, sens = new Float64Array(2 * coils * p.iso.count);
    for (let k = 0; k < sens.length; k++) sens[k] = r() - 0.5;
    const { kspace } = simulateSerial(p.seq, p.iso, { receiverFilter: false, coils, sens, readout: "direct" });
    const d = directBloch(p.seq, p.iso, false, coils, sens);
    expect(relL2(kspace.re, kspace.im, d.re, d.im)).toBeLessThan(1e-9);
    const f = simulateSerial(p.seq, p.iso, { receiverFilter: false, coils, sens, readout: "fast" });
    expect(f.readout.operator).toBe("fast");
    expect(relL2(f.kspace.re, f.kspace.im, d.re, d.im)).toBeLessThan(1e-6);
  }, 60_000);

  test("a chunk's k-space does not depend on the scratch's history (same bits when re-run)", () => {
    const p = smallCase();
    const plan = makePlan(p.seq, p.iso, { receiverFilter: true });
    const s = new ChunkScratch(plan);
    const size = plan.rows * plan.read;
    const a = [new Float64Array(size), new Float64Array(size)], b = [new Float64Array(size), new Float64Array(size)];
    runChunk(plan, p.iso, plan.chunks - 1, a[0]!, a[1]!, s);
    for (let c = 0; c < plan.chunks; c++) runChunk(plan, p.iso, c, new Float64Array(size), new Float64Array(size), s);
    runChunk(plan, p.iso, plan.chunks - 1, b[0]!, b[1]!, s);
    expect(Buffer.from(b[0]!.buffer).equals(Buffer.from(a[0]!.buffer))).toBe(true);
    expect(Buffer.from(b[1]!.buffer).equals(Buffer.from(a[1]!.buffer))).toBe(true);
  }, 60_000);
});

describe("summation order and shards", () => {
  test("shard block ranges are contiguous, disjoint and cover every block", () => {
    for (const blocks of [0, 1, 5, 17]) {
      for (const n of [1, 2, 3, 7]) {
        let at = 0;
        for (let i = 0; i < n; i++) {
          const [b0, b1] = shardBlocks(blocks, i, n);
          expect(b0).toBe(at);
          expect(b1).toBeGreaterThanOrEqual(b0);
          at = b1;
        }
        expect(at).toBe(blocks);
      }
    }
    expect(blockCount(4 * BLOCK_CHUNKS + 1)).toBe(5);
  });

  test("with Δf different for every isochromat (RF maps filled on the workers), 2 and 3 workers give bitwise the serial k-space", async () => {
    const p = smallCase(["matrix.read=32", "matrix.phase=32"], "gre-demo-1.5t", 2);
    const df = new Float64Array(p.iso.df);
    for (let i = 0; i < df.length; i++) df[i] = df[i]! + ((i * 7919) % 1000) * 0.37 - 150;
    const iso = { ...p.iso, df };
    const serial = simulateSerial(p.seq, iso, { receiverFilter: true, readout: "direct" }).kspace;
    for (const workers of [2, 3]) {
      const { kspace, plan } = await simulateParallel(p.seq, iso, { receiverFilter: true, workers, readout: "direct" });
      expect(plan.classes).toBeGreaterThanOrEqual(PARALLEL_RF_CLASSES);
      expect(Buffer.from(kspace.re.buffer).equals(Buffer.from(serial.re.buffer))).toBe(true);
      expect(Buffer.from(kspace.im.buffer).equals(Buffer.from(serial.im.buffer))).toBe(true);
    }
  }, 60_000);

  test("a single chunk summed in place by the serial run gives bitwise the block-order sum of the serial executor", async () => {
    const p = smallCase(["matrix.read=32", "matrix.phase=32"]);
    const one = simulateSerial(p.seq, p.iso, { receiverFilter: true, readout: "direct" });
    expect(one.plan.chunks).toBe(1);
    const blocks: number[] = [];
    const viaSummer = await simulateWith(serialExecutor(), p.seq, p.iso, { receiverFilter: true, readout: "direct", onBlock: (b) => blocks.push(b) });
    expect(blocks).toEqual([0]);
    expect(one.kspace.re.some((x) => x !== 0)).toBe(true);
    expect(Buffer.from(one.kspace.re.buffer).equals(Buffer.from(viaSummer.kspace.re.buffer))).toBe(true);
    expect(Buffer.from(one.kspace.im.buffer).equals(Buffer.from(viaSummer.kspace.im.buffer))).toBe(true);
  });

  test("the worker pool with 1, 2 and 3 workers gives bitwise the serial k-space", async () => {
    const p = smallCase(["matrix.read=32", "matrix.phase=32"]);
    const chunkIsochromats = 64;
    const serial = simulateSerial(p.seq, p.iso, { receiverFilter: true, chunkIsochromats, readout: "direct" }).kspace;
    expect(serial.re.some((x) => x !== 0)).toBe(true);
    for (const workers of [1, 2, 3]) {
      const { kspace, plan } = await simulateParallel(p.seq, p.iso, { receiverFilter: true, workers, chunkIsochromats, readout: "direct" });
      expect(plan.chunks).toBeGreaterThan(2 * BLOCK_CHUNKS);
      expect(Buffer.from(kspace.re.buffer).equals(Buffer.from(serial.re.buffer))).toBe(true);
      expect(Buffer.from(kspace.im.buffer).equals(Buffer.from(serial.im.buffer))).toBe(true);
    }
  }, 60_000);
});
