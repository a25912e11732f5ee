/**
 * Spoiled gradient echo, Cartesian, 2D or 3D. One TR:
 *   slice- (slab-) select ramp, excitation, ramp | delay | slice rephaser +
 *   slice-encoding step encode + phase encode + read prephaser (concurrent) | readout |
 *   phase and slice-encoding step rewinders + slice spoiler | delay to TR | ideal spoil (if chosen).
 * TE runs from the excitation's centre to the k = 0 sample; TR from one
 * excitation centre to the next.
 *
 * 3D: the slab is slice-encoding steps × slice.thickness; slice-encoding step encoding steps
 * ΔA = 1/(γ̄·slab) (FOV = 1/Δk, Bernstein et al. 2004 ch. 11); row =
 * slice-encoding step·phaseLines + line, slice-encoding steps in the outer loop. The receiver
 * phase −2π·k_p·w_c references slice-encoding step ⌊N/2⌋ to w_c, the centre of that
 * slice-encoding step when the N slice-encoding steps tile the slab [position ± slab/2], so the
 * centred FFT puts slice-encoding step n at w_c + (n − ⌊N/2⌋)·thickness.
 */
import type { Protocol } from "../protocol/types.js";
import { GAMMA_BAR } from "../constants.js";
import {
  commonDerived, Demand, lobes, maxPhaseArea, phasePlan, pushPulse, pushReadout, pushReadoutSilent, readoutPlan,
  requireAtLeast, rfSpoilPhase, sliceSelect,
} from "./common.js";
import type { Block, Sequence, SequenceDefinition } from "./types.js";

export function buildGre(p: Protocol): Sequence {
  const threeD = p.sequence === "gre3d";
  const demand = new Demand();
  const ro = readoutPlan(p);
  demand.add(0, ro.gradient, ro.ramp);
  const pe = phasePlan(p);
  const nPart = threeD ? p.matrix.slice : 1;
  const slab = nPart * p.slice.thickness;
  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip, slab, p.slice.position, demand);
  const partStep = threeD ? 1 / (GAMMA_BAR * slab) : 0;
  const partCentre = Math.floor(nPart / 2);
  const maxPart = Math.max(partCentre, nPart - 1 - partCentre) * partStep;
  const wc = p.slice.position + (threeD && nPart % 2 === 0 ? p.slice.thickness / 2 : 0);

  const maxPe = maxPhaseArea(pe);
  const prep = lobes([ro.prephaser, maxPe, Math.abs(exc.areaAfterCentre) + maxPart], p, demand);
  const teMin = exc.afterCentre + prep.duration + ro.toEcho;
  requireAtLeast("te", p.te, teMin);
  const teDelay = p.te - teMin;

  const spoilArea = p.spoiling === "none" ? 0 : p.spoilerCycles / (GAMMA_BAR * p.slice.thickness);
  const post = lobes([0, maxPe, spoilArea + maxPart], p, demand);
  const active = exc.duration + teDelay + prep.duration + ro.duration + post.duration;
  const trMin = active;
  requireAtLeast("tr", p.tr, trMin, `at te ${(p.te * 1e3).toFixed(2)} ms`);
  const trDelay = p.tr - active;

  const blocks: Block[] = [];
  const perPart = pe.acquired * p.averages;
  const total = p.dummyScans + nPart * perPart;
  const rows = nPart * pe.lines;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const part = acq >= 0 ? Math.floor(acq / perPart) : partCentre;
    const line = acq >= 0 ? pe.order[Math.floor((acq % perPart) / p.averages)]! : pe.centre;
    const peArea = (line - pe.centre) * pe.step;
    const kp = (part - partCentre) / slab; // slice-encoding k (1/m)
    const partArea = (part - partCentre) * partStep;
    const phase = p.spoiling === "rf" ? rfSpoilPhase(n, p.rfSpoilIncrement) : 0;
    pushPulse(blocks, exc, phase);
    if (teDelay > 0) blocks.push({ kind: "free", duration: teDelay, area: [0, 0, 0] });
    blocks.push({ kind: "free", duration: prep.duration, area: [ro.prephaser, peArea, -exc.areaAfterCentre + partArea] });
    if (acq >= 0) pushReadout(blocks, ro, part * pe.lines + line, phase - 2 * Math.PI * kp * wc * (threeD ? 1 : 0), 1 / p.averages);
    else pushReadoutSilent(blocks, ro);
    blocks.push({ kind: "free", duration: post.duration, area: [0, -peArea, spoilArea - partArea] });
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
    if (p.spoiling === "ideal") blocks.push({ kind: "spoil" });
  }
  const derived = commonDerived(p, ro, pe, exc, demand, nPart);
  const scanTime = total * p.tr;
  derived["teMin"] = { value: teMin, unit: "s" };
  derived["trMin"] = { value: trMin, unit: "s", note: "at the TE chosen" };
  derived["prephaserDuration"] = { value: prep.duration, unit: "s" };
  derived["prephaserReadAmplitude"] = { value: prep.trap[0]!.amplitude, unit: "T/m" };
  derived["prephaserReadRamp"] = { value: prep.trap[0]!.ramp, unit: "s" };
  if (threeD) {
    derived["slabThickness"] = { value: slab, unit: "m", note: "slice-encoding steps × slice.thickness" };
    derived["deltaKSliceEncoding"] = { value: 1 / slab, unit: "1/m", note: "Δk = 1/slab" };
    derived["kMaxSliceEncoding"] = { value: nPart / slab / 2, unit: "1/m" };
    derived["sliceEncodingStepArea"] = { value: partStep, unit: "T·s/m", note: "ΔA = 1/(γ̄·slab)" };
  }
  derived["scanTime"] = { value: scanTime, unit: "s", note: `(${p.dummyScans} dummy + ${nPart * perPart} acquired TRs) × TR` };
  return {
    name: threeD ? "3D spoiled gradient echo" : "2D spoiled gradient echo",
    pulses: [exc.pulse],
    blocks,
    kspace: { slice: nPart, phase: pe.lines, read: ro.samples },
    image: { slice: nPart, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin, trMin, te: p.te, tr: p.tr, scanTime },
    derived,
    quantities: { sliceGradient: exc.pulse.gradient },
    grid: {
      read: ro.full, offset: ro.offset, reversed: ro.polarity < 0 ? new Uint8Array(rows).fill(1) : null,
      partialFourier: { ...p.partialFourier }, phaseFirst: pe.first, threeD,
    },
    phaseTable: Array.from(pe.order, (line) => ({ line, area: (line - pe.centre) * pe.step })),
    activeTime: active,
  };
}

/** 2D spoiled gradient echo. */
export const GRE: SequenceDefinition = {
  name: "gre", description: "2D spoiled gradient echo", build: buildGre,
  defaults: { flip: (20 * Math.PI) / 180, echoTrainLength: 1 }, refocuses: () => false, spoils: true, threeD: false,
};

/** 3D spoiled gradient echo (the same builder; slice-encoding steps from matrix.slice). */
export const GRE3D: SequenceDefinition = {
  name: "gre3d", description: "3D spoiled gradient echo (slab excitation, phase encoding in two directions)", build: buildGre,
  defaults: { flip: (20 * Math.PI) / 180, echoTrainLength: 1 }, refocuses: () => false, spoils: true, threeD: true,
};
