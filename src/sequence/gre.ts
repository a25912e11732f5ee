/**
 * Spoiled gradient echo, Cartesian, 2D or 3D. One TR:
 *   slice- (slab-) select ramp, excitation, ramp | delay | slice rephaser +
 *   partition encode + phase encode + read prephaser (concurrent) | readout |
 *   phase and partition rewinders + slice spoiler | delay to TR | ideal spoil (if chosen).
 * TE runs from the excitation's centre to the k = 0 sample; TR from one
 * excitation centre to the next.
 *
 * 3D: the slab is partitions × slice.thickness; partition encoding steps
 * ΔA = 1/(γ̄·slab) (FOV = 1/Δk, Bernstein et al. 2004 ch. 11); row =
 * partition·phaseLines + line, partitions in the outer loop. The receiver
 * phase −2π·k_p·w_c references partition ⌊N/2⌋ to w_c, the centre of that
 * partition when the N partitions tile the slab [position ± slab/2], so the
 * centred FFT puts partition n at w_c + (n − ⌊N/2⌋)·thickness.
 */
import type { Protocol } from "../protocol/types.js";
import { GAMMA_BAR } from "../constants.js";
import {
  commonDerived, Demand, lobes, maxPhaseArea, phasePlan, pushPulse, pushReadout, pushReadoutSilent, readoutPlan,
  requireAtLeast, rfSpoilPhase, sliceSelect,
} from "./common.js";
import type { Block, Sequence } from "./types.js";

export function buildGre(p: Protocol): Sequence {
  const threeD = p.sequence === "gre3d";
  const demand = new Demand();
  const ro = readoutPlan(p);
  demand.add(0, ro.gradient, ro.ramp);
  const pe = phasePlan(p);
  const nPart = threeD ? p.matrix.partitions : 1;
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
    const kp = (part - partCentre) / slab; // partition k (1/m)
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
    derived["slabThickness"] = { value: slab, unit: "m", note: "partitions × slice.thickness" };
    derived["deltaKPartition"] = { value: 1 / slab, unit: "1/m", note: "Δk = 1/slab" };
    derived["kMaxPartition"] = { value: nPart / slab / 2, unit: "1/m" };
    derived["partitionStepArea"] = { value: partStep, unit: "T·s/m", note: "ΔA = 1/(γ̄·slab)" };
  }
  derived["scanTime"] = { value: scanTime, unit: "s", note: `(${p.dummyScans} dummy + ${nPart * perPart} acquired TRs) × TR` };
  return {
    name: threeD ? "3D spoiled gradient echo" : "2D spoiled gradient echo",
    pulses: [exc.pulse],
    blocks,
    kspace: { partitions: nPart, phase: pe.lines, read: ro.samples },
    image: { partitions: nPart, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin, trMin, te: p.te, tr: p.tr, scanTime },
    derived,
    grid: {
      read: ro.full, offset: ro.offset, reversed: ro.polarity < 0 ? new Uint8Array(rows).fill(1) : null,
      partialFourier: { ...p.partialFourier }, phaseFirst: pe.first, threeD,
    },
    phaseTable: Array.from(pe.order, (line) => ({ line, area: (line - pe.centre) * pe.step })),
    activeTime: active,
  };
}
