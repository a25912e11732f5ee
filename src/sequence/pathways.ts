/**
 * Through-slice gradient moments of the coherence pathways of a sequence, in
 * the configuration (extended phase graph) picture: between RF pulses a
 * transverse configuration F(k) gathers the slice-axis gradient area, k in
 * cycles per slice thickness (γ̄·A·Δz); an RF pulse sends F(k) to F(k), F(−k)
 * and Z(k), and Z(k) to Z(k) and F(±k) (Hennig 1988, J Magn Reson 78:397;
 * Weigel 2015, JMRI 41:266). The RF blocks' own slice-select lobes count:
 * the part before the pulse centre before the transition, the rest after.
 *
 * A discrete through-slice grid of ρ isochromats per thickness sums a pathway
 * of moment K as if it had the moments K − m·ρ (aliasing of a sampled
 * Fourier integral). The copy nearest zero lies farther out than K itself
 * (so it is attenuated by the slice profile's spectrum at least as much as
 * the true residual) when ρ ≥ 2K + 1 — the rule the pipeline uses.
 *
 * Pathway order: the number of pulses at which the pathway left its primary
 * route. At a refocusing pulse (flip above 90°) the primary route of F(k) is
 * F(−k); staying F(k), storing Z(k), recalling Z(k) and a fresh FID from
 * Z(0) count one each. At an excitation (flip up to 90°) every transition of
 * an existing configuration counts one; the FID from Z(0) is primary. Single
 * spin echo: order ≤ 1 holds all pathways (K = 2c + tbw with c-cycle
 * crushers and a refocusing pulse of time-bandwidth tbw); echo trains grow
 * without bound, so orders above `maxOrder` are left out.
 */
import { GAMMA_BAR } from "../constants.js";
import type { Sequence } from "./types.js";

export interface PathwayMoments {
  /** Largest |moment| (cycles per slice thickness) of a pathway of order ≤ maxOrder at the centre of any ADC of one acquired repetition. */
  maxMoment: number;
  /** Every distinct |moment| seen at an ADC (cycles per thickness), ascending. */
  moments: number[];
  /** Largest time-bandwidth product of a slice-selective pulse (γ̄·G·duration·thickness, cycles per thickness). */
  maxPulseTbw: number;
  /** Pathways (configurations) followed, for reports. */
  configurations: number;
  /** Highest order followed. */
  maxOrder: number;
}

interface State { k: number; order: number; f: boolean }

/**
 * Walks the blocks of lookBack + 1 repetitions ending with (or, without
 * earlier ones, starting at) the first one holding an ADC, so pathways
 * carried across TRs by imperfect spoiling are seen, and returns the largest through-slice moment
 * at the ADCs. `thickness` (m) sets the unit: cycles per thickness.
 */
export function pathwayMoments(seq: Sequence, thickness: number, maxOrder = 2, lookBack = 1): PathwayMoments {
  const blocks = seq.blocks;
  const isExc = (i: number) => {
    const b = blocks[i]!;
    return b.kind === "rf" && b.pulse === 0;
  };
  const firstAdc = blocks.findIndex((b) => b.kind === "adc");
  const maxPulseTbw = Math.max(0, ...seq.pulses.map((q) => Math.abs(q.gradient * q.duration * GAMMA_BAR * thickness)));
  if (firstAdc < 0) return { maxMoment: 0, moments: [], maxPulseTbw, configurations: 0, maxOrder };
  const exc: number[] = [];
  for (let i = 0; i < blocks.length; i++) if (isExc(i)) exc.push(i);
  let j = 0;
  while (j + 1 < exc.length && exc[j + 1]! <= firstAdc) j++;
  const first = Math.max(0, j - lookBack);
  const start = exc.length ? Math.min(exc[first]!, firstAdc) : 0;
  const end = exc[first + lookBack + 1] ?? blocks.length;
  const unit = GAMMA_BAR * thickness;
  const key = (s: State) => `${s.f ? "F" : "Z"}${Math.round(s.k * 1e6)}`;
  let states = new Map<string, State>();
  let seen = 0;
  let maxMoment = 0;
  const atAdc = new Map<number, number>();
  const add = (m: Map<string, State>, s: State) => {
    if (s.order > maxOrder) return;
    if (!s.f && Math.abs(s.k) < 1e-9) return; // Z(0) is the equilibrium reservoir, always there
    const kk = key(s);
    const old = m.get(kk);
    if (!old || old.order > s.order) m.set(kk, s);
  };
  const shift = (dk: number) => {
    if (dk === 0) return;
    const next = new Map<string, State>();
    for (const s of states.values()) add(next, s.f ? { ...s, k: s.k + dk } : s);
    states = next;
  };
  for (let i = start; i < end; i++) {
    const b = blocks[i]!;
    if (b.kind === "free") shift(b.area[2] * unit);
    else if (b.kind === "spoil") {
      for (const [kk, s] of states) if (s.f) states.delete(kk);
    } else if (b.kind === "adc") {
      // a slice-axis gradient during the ADC moves the moment; take the centre of the window
      const half = (b.grad[2] * b.samples * b.dwell * unit) / 2;
      shift(half);
      for (const s of states.values()) {
        if (!s.f) continue;
        maxMoment = Math.max(maxMoment, Math.abs(s.k));
        atAdc.set(Math.round(Math.abs(s.k) * 1e3), Math.abs(s.k));
      }
      shift(half);
    } else {
      const pulse = seq.pulses[b.pulse]!;
      shift(pulse.gradient * pulse.centre * unit);
      const refocusing = pulse.flip > Math.PI / 2 + 1e-9;
      const next = new Map<string, State>();
      add(next, { k: 0, order: refocusing ? 1 : 0, f: true }); // FID from Z(0)
      for (const s of states.values()) {
        if (s.f) {
          add(next, { k: -s.k, order: s.order + (refocusing ? 0 : 1), f: true });
          add(next, { k: s.k, order: s.order + 1, f: true });
          add(next, { k: s.k, order: s.order + 1, f: false });
        } else {
          add(next, s);
          add(next, { k: s.k, order: s.order + 1, f: true });
          add(next, { k: -s.k, order: s.order + 1, f: true });
        }
      }
      states = next;
      seen += states.size;
      shift(pulse.gradient * (pulse.duration - pulse.centre) * unit);
    }
  }
  return { maxMoment, moments: [...atAdc.values()].sort((a, b) => a - b), maxPulseTbw, configurations: seen, maxOrder };
}

/**
 * Smallest number n ≥ `minimum` of through-slice isochromats over `extent`
 * thicknesses (ρ = n/extent per thickness) such that no alias K − m·ρ
 * (m ≠ 0) of any moment K in `moments` — nor of the primary pathway K = 0 —
 * lands within `reach` cycles per thickness of zero, where the slice
 * profiles' spectra still carry signal. Searches n upward (at most `cap`).
 */
export function aliasFreeCount(moments: number[], reach: number, extent: number, minimum: number, cap = 1 << 14): number {
  const ks = [0, ...moments];
  const ok = (rho: number): boolean => {
    if (rho < reach) return false;
    for (const K of ks) {
      // aliases K − m·ρ nearest zero: m = floor(K/ρ) and m + 1 (m ≥ 1)
      const m0 = Math.max(1, Math.floor(K / rho));
      for (const m of [m0, m0 + 1]) if (Math.abs(K - m * rho) < reach) return false;
    }
    return true;
  };
  for (let n = Math.max(1, minimum); n <= cap; n++) if (ok(n / extent)) return n;
  return cap;
}
