/**
 * 2D echo-planar imaging (Mansfield 1977, J Phys C 10:L55), blipped phase
 * encoding, flat-top sampling, single-shot or segmented (interleaved shots),
 * gradient-echo or spin-echo. One shot:
 *   excitation | [spin echo: slice rephaser + crusher | 180° | crusher] |
 *   read prephaser + phase prephaser + slice rephaser | echo train | phase
 *   rewinder + spoiler | delay to TR | ideal spoil.
 * Echo e of a shot is read under polarity (−1)^e; its samples are stored in
 * time order and the row is reversed in the recon (Sequence.grid.reversed).
 * Each readout lobe has one dwell of plateau before the first sample, so the
 * samples are symmetric within the lobe and back-and-forth lines meet on the
 * same k grid. Between lines a phase blip of shots·Δk plays during the ramps
 * (longer gaps only if the blip needs them).
 * Echo spacing ESP = 2·ramp + (N + 1)·dwell (+ blip excess). Shot s reads lines
 * first + s + shots·e, so the time per Δk step along phase is ESP/shots, and an
 * off-resonance Δf moves the object along phase by Δf·N_lines·ESP/shots pixels
 * (Jezzard & Balaban 1995, MRM 34:65; Bernstein et al. 2004 §16.1).
 * TE is measured from the excitation centre to k = 0 of the centre line.
 */
import type { Protocol } from "../protocol/types.js";
import { GAMMA_BAR } from "../constants.js";
import { UserError } from "../errors.js";
import {
  commonDerived, Demand, lobes, phasePlan, pushPulse, readoutPlan, requireAtLeast, sliceSelect,
} from "./common.js";
import { minTrapezoid } from "./trapezoid.js";
import type { Block, Sequence, SequenceDefinition } from "./types.js";

export function buildEpi(p: Protocol): Sequence {
  const demand = new Demand();
  const pos = readoutPlan(p, { polarity: p.readoutPolarity, symmetric: true });
  const neg = readoutPlan(p, { polarity: p.readoutPolarity === 1 ? -1 : 1, symmetric: true });
  demand.add(0, pos.gradient, pos.ramp);
  const pe = phasePlan({ ...p, phaseOrder: "linear" });
  const S = p.shots;
  if (pe.acquired % S !== 0) {
    const ok: number[] = [];
    for (let k = 1; k <= Math.min(pe.acquired, 64); k++) if (pe.acquired % k === 0) ok.push(k);
    throw new UserError(`${pe.acquired} acquired phase lines do not split into ${S} shots; use shots that divide ${pe.acquired} (${ok.join(", ")})`, undefined, "shots");
  }
  const E = pe.acquired / S; // echoes per shot
  const blip = minTrapezoid(S * pe.step, p.hardware.gmax, p.hardware.slew);
  demand.add(1, blip.amplitude, blip.ramp);
  const gapExtra = Math.max(0, blip.duration - 2 * pos.ramp);
  const esp = pos.duration + gapExtra;

  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip, undefined, undefined, demand);
  const spin = p.epiEcho === "spin";
  const ref = spin ? sliceSelect(p, 1, "refocusing", p.refocusing, p.refocusFlip, undefined, undefined, demand) : null;
  const crush = p.crusherCycles / (GAMMA_BAR * p.slice.thickness);
  const maxPre = Math.max(pe.centre - pe.first, 1) * pe.step;
  const prep = lobes([pos.prephaser, maxPre, spin ? 0 : -exc.areaAfterCentre], p, demand);
  const before = spin ? lobes([0, 0, crush - exc.areaAfterCentre], p, demand) : null;
  const crushAfter = spin ? lobes([0, 0, crush], p, demand) : null;

  // Echo of the centre line: shot sc = (c − first) mod S, echo index ec.
  const ec = Math.floor((pe.centre - pe.first) / S);
  const sc = (pe.centre - pe.first) % S;
  // Echo-time shifting (Feinberg & Oshio 1994, MRM 32:535): shot s starts its train s·ESP/S later,
  // so line l is read at T_c + (l − c)·ESP/S and the off-resonance phase is linear across all lines.
  const shift = (s: number) => (s * esp) / S;
  const ro = (e: number) => (e % 2 === 0 ? pos : neg);
  const echoTime = (e: number) => e * esp + ro(e).toEcho; // from the start of the first readout lobe
  // time from the excitation centre to the first readout lobe, minimum
  let teMin: number, startDelay: number, d1 = 0, d2 = 0;
  if (!spin) {
    teMin = exc.afterCentre + prep.duration + echoTime(ec) + shift(sc);
    requireAtLeast("te", p.te, teMin);
    startDelay = p.te - teMin;
  } else {
    const half1 = exc.afterCentre + before!.duration + ref!.toCentre;
    const half2 = ref!.afterCentre + crushAfter!.duration + prep.duration + echoTime(ec) + shift(sc);
    teMin = 2 * Math.max(half1, half2);
    requireAtLeast("te", p.te, teMin);
    d1 = p.te / 2 - half1;
    d2 = p.te / 2 - half2;
    startDelay = 0;
  }
  const spoilArea = p.spoiling === "none" ? 0 : p.spoilerCycles / (GAMMA_BAR * p.slice.thickness);
  const post = lobes([0, (pe.lines - pe.centre) * pe.step, spoilArea], p, demand);
  const trainTime = E * esp - gapExtra;
  // from the excitation centre to the start of shot 0's train; shot s adds shift(s)
  const toTrain = spin ? p.te / 2 + ref!.afterCentre + crushAfter!.duration + d2 + prep.duration : exc.afterCentre + startDelay + prep.duration;
  const active = exc.toCentre + toTrain + shift(S - 1) + trainTime + post.duration;
  requireAtLeast("tr", p.tr, active, `for ${E} echoes of ${(esp * 1e3).toFixed(3)} ms`);
  const trDelay = p.tr - active;

  const blocks: Block[] = [];
  const reversed = new Uint8Array(pe.lines);
  const echoTimes = new Float64Array(pe.lines).fill(NaN);
  const table: { line: number; area: number }[] = [];
  const total = p.dummyScans + S * p.averages;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const shot = acq >= 0 ? Math.floor(acq / p.averages) : 0;
    pushPulse(blocks, exc, 0);
    if (spin) {
      blocks.push({ kind: "free", duration: before!.duration + d1, area: [0, 0, crush - exc.areaAfterCentre] });
      pushPulse(blocks, ref!, Math.PI / 2);
      blocks.push({ kind: "free", duration: crushAfter!.duration + d2, area: [0, 0, crush] });
    } else if (startDelay > 0) blocks.push({ kind: "free", duration: startDelay, area: [0, 0, 0] });
    if (shift(shot) > 0) blocks.push({ kind: "free", duration: shift(shot), area: [0, 0, 0] });
    const line0 = pe.first + shot;
    let peAcc = (line0 - pe.centre) * pe.step;
    blocks.push({ kind: "free", duration: prep.duration, area: [pos.prephaser, peAcc, spin ? 0 : -exc.areaAfterCentre] });
    for (let e = 0; e < E; e++) {
      const r = ro(e);
      const line = line0 + S * e;
      const g = r.gradient;
      if (r.ramp > 0) blocks.push({ kind: "free", duration: r.ramp, area: [(g * r.ramp) / 2, 0, 0] });
      blocks.push({ kind: "free", duration: r.preFlat, area: [g * r.preFlat, 0, 0] });
      if (acq >= 0) {
        blocks.push({ kind: "adc", samples: r.samples, dwell: r.dwell, grad: [g, 0, 0], row: line, phase: 0, weight: 1 / p.averages });
        reversed[line] = r.polarity < 0 ? 1 : 0;
        echoTimes[line] = p.te + (e - ec) * esp + (r.toEcho - ro(ec).toEcho) + shift(shot) - shift(sc);
        if (acq % p.averages === 0) table.push({ line, area: (line - pe.centre) * pe.step });
      } else blocks.push({ kind: "free", duration: r.flat, area: [g * r.flat, 0, 0] });
      const last = e === E - 1;
      blocks.push({ kind: "free", duration: r.ramp, area: [(g * r.ramp) / 2, last ? 0 : S * pe.step, 0] });
      if (!last) {
        peAcc += S * pe.step;
        if (gapExtra > 0) blocks.push({ kind: "free", duration: gapExtra, area: [0, 0, 0] });
      }
    }
    // rewind the phase moment, spoil (the read moment is left to the spoiler and the ideal spoil)
    blocks.push({ kind: "free", duration: post.duration, area: [0, -peAcc, spoilArea] });
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
    blocks.push({ kind: "spoil" });
  }
  const derived = commonDerived(p, pos, pe, exc, demand);
  const scanTime = total * p.tr;
  // time per phase-encoding step: shot s reads lines s, s + S, … staggered by ESP/S (echo-time shifting)
  const tau = esp / S;
  derived["echoSpacing"] = { value: esp, unit: "s", note: "2·ramp + (N+1)·dwell (+ blip excess), from the trapezoids" };
  derived["effectiveEchoSpacing"] = { value: tau, unit: "s", note: "ESP/shots: time between adjacent phase-encoding lines; sets the phase-direction shift and distortion" };
  derived["echoesPerShot"] = { value: E, unit: "echoes" };
  derived["shots"] = { value: S, unit: "excitations" };
  derived["phaseBlipArea"] = { value: S * pe.step, unit: "T·s/m" };
  derived["phaseBlipDuration"] = { value: blip.duration, unit: "s" };
  derived["phasePixelBandwidth"] = { value: 1 / (tau * pe.lines), unit: "Hz/px", note: "1/(N_lines·ESP/shots): Δy_px = Δf/BW_px,phase (Jezzard & Balaban 1995)" };
  derived["trainDuration"] = { value: trainTime, unit: "s" };
  derived["prephaserDuration"] = { value: prep.duration, unit: "s" };
  derived["prephaserReadAmplitude"] = { value: prep.trap[0]!.amplitude, unit: "T/m" };
  derived["teMin"] = { value: teMin, unit: "s" };
  derived["trMin"] = { value: active, unit: "s" };
  derived["scanTime"] = { value: scanTime, unit: "s" };
  return {
    name: `2D ${spin ? "spin" : "gradient"}-echo EPI, ${S === 1 ? "single shot" : `${S} shots`}`,
    pulses: ref ? [exc.pulse, ref.pulse] : [exc.pulse],
    blocks,
    kspace: { slice: 1, phase: pe.lines, read: pos.samples },
    image: { slice: 1, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: pos.echoSample, phase: pe.centre },
    timing: { teMin, trMin: active, te: p.te, tr: p.tr, scanTime },
    derived,
    quantities: { sliceGradient: exc.pulse.gradient, ...(ref ? { refocusGradient: ref.pulse.gradient } : {}), echoSpacing: esp, effectiveEchoSpacing: tau },
    grid: { read: pos.full, offset: pos.offset, reversed, partialFourier: { ...p.partialFourier }, phaseFirst: pe.first, threeD: false },
    phaseTable: table,
    activeTime: active,
    echoTimes,
  };
}

export const EPI: SequenceDefinition = {
  name: "epi", description: "2D echo-planar imaging (single-shot or segmented, gradient or spin echo)", build: buildEpi,
  defaults: { flip: Math.PI / 2, echoTrainLength: 1 }, refocuses: (p) => p.epiEcho === "spin", spoils: true, threeD: false,
};
