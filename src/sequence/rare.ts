/**
 * 2D RARE / fast spin echo (Hennig, Nauerth & Friedburg 1986, MRM 3:823):
 * one 90° (phase 0) then an echo train of `echoTrainLength` refocusing pulses
 * (phase 90°, CPMG: Carr & Purcell 1954; Meiboom & Gill 1958), echo spacing
 * ESP between refocusing centres; echo e (0-based) forms at (e+1)·ESP. Each
 * echo reads one phase line: phase encode after the refocusing pulse, rewind
 * before the next, so the dephasing at every refocusing pulse is the same
 * (the CPMG condition). Equal crushers on both sides of each refocusing pulse.
 *
 * Ordering: the acquired lines, sorted by k, are cut into ETL segments of
 * `shots` lines; shot s reads line s of each segment. The echo that reads the
 * segment holding k = 0 sets the effective TE = (e_c + 1)·ESP = te.
 *   linear:  echo e reads segment (e − e_c + c_s) mod ETL, so k sweeps upward along the train;
 *   centric: echoes by rising |e − e_c| read segments by rising distance from the centre segment c_s.
 * Echo n of ideal 180° pulses carries M0·e^(−n·ESP/T2) (CPMG).
 */
import type { Protocol } from "../protocol/types.js";
import { GAMMA_BAR } from "../constants.js";
import { UserError } from "../errors.js";
import {
  commonDerived, Demand, lobes, maxPhaseArea, phasePlan, pushPulse, pushReadout, pushReadoutSilent, readoutPlan,
  requireAtLeast, sliceSelect,
} from "./common.js";
import type { Block, Sequence, SequenceDefinition } from "./types.js";

/** Indices 0…n−1 ordered by distance from `c`: c, c+1, c−1, c+2, … */
function byDistance(c: number, n: number): number[] {
  const out = [c];
  for (let d = 1; out.length < n; d++) {
    if (c + d < n) out.push(c + d);
    if (c - d >= 0 && out.length < n) out.push(c - d);
  }
  return out;
}

export function buildRare(p: Protocol): Sequence {
  const demand = new Demand();
  const ro = readoutPlan(p);
  demand.add(0, ro.gradient, ro.ramp);
  const pe = phasePlan(p);
  const etl = p.echoTrainLength;
  if (pe.acquired % etl !== 0) {
    const ok: number[] = [];
    for (let k = 1; k <= Math.min(pe.acquired, 64); k++) if (pe.acquired % k === 0) ok.push(k);
    throw new UserError(
      `${pe.acquired} acquired phase lines do not split into echo trains of ${etl}; use an echoTrainLength that divides ${pe.acquired} (${ok.join(", ")})`,
      undefined, "echoTrainLength",
    );
  }
  const shots = pe.acquired / etl;
  const exc = sliceSelect(p, 0, "excitation", p.excitation, p.flip, undefined, undefined, demand);
  const ref = sliceSelect(p, 1, "refocusing", p.refocusing, p.refocusFlip, undefined, undefined, demand);
  const crush = p.crusherCycles / (GAMMA_BAR * p.slice.thickness);
  const maxPe = maxPhaseArea(pe);

  // Read axis: a_pre before the first refocusing pulse (inverted by it) brings k = 0 to the echo sample;
  // after the readout, Y restores a_pre for the next refocusing pulse.
  const aPre = -ro.prephaser;
  const yArea = aPre - ro.prephaser - ro.lobeArea; // = 2·a_pre − L
  const l1 = lobes([aPre, 0, crush - exc.areaAfterCentre], p, demand);
  const l2 = lobes([0, maxPe, crush], p, demand);
  const l3 = lobes([yArea, maxPe, crush], p, demand);
  const h1 = exc.afterCentre + l1.duration + ref.toCentre;
  const h2 = ref.afterCentre + l2.duration + ro.toEcho;
  const h3 = ro.afterEcho + l3.duration + ref.toCentre;
  const espMin = 2 * Math.max(h1, h2, h3);

  let esp: number, ec: number;
  if (p.echoSpacing > 0) {
    requireAtLeast("echoSpacing", p.echoSpacing, espMin);
    esp = p.echoSpacing;
    ec = Math.round(p.te / esp) - 1;
    if (ec < 0 || ec >= etl || Math.abs((ec + 1) * esp - p.te) > 1e-6) {
      const lo = Math.max(1, Math.min(etl, Math.floor(p.te / esp + 1e-9))), hi = Math.min(etl, lo + 1);
      throw new UserError(
        `effective TE ${(p.te * 1e3).toFixed(2)} ms is not an echo of the train (echoes at n × ${(esp * 1e3).toFixed(2)} ms, n = 1…${etl}); ` +
          `set te to ${(lo * esp * 1e3).toFixed(2)} ms${hi !== lo ? ` or ${(hi * esp * 1e3).toFixed(2)} ms` : ""}`,
        undefined, "te",
      );
    }
  } else {
    requireAtLeast("te", p.te, espMin, "the shortest echo spacing allows");
    ec = Math.min(etl - 1, Math.floor(p.te / espMin + 1e-9) - 1);
    esp = p.te / (ec + 1);
  }
  const trainEnd = etl * esp + ro.afterEcho + l3.duration;
  const active = exc.toCentre + trainEnd;
  requireAtLeast("tr", p.tr, active, `for ${etl} echoes of ${(esp * 1e3).toFixed(2)} ms`);
  const trDelay = p.tr - active;

  // Segments of the sorted acquired lines; c_s holds the centre line.
  const cs = Math.floor((pe.centre - pe.first) / shots);
  const segOfEcho = new Int32Array(etl);
  if (p.echoOrder === "linear") {
    for (let e = 0; e < etl; e++) segOfEcho[e] = (((e - ec + cs) % etl) + etl) % etl;
  } else {
    const echoes = byDistance(ec, etl), segs = byDistance(cs, etl);
    echoes.forEach((e, i) => (segOfEcho[e] = segs[i]!));
  }
  const lineOf = (shot: number, e: number) => pe.first + segOfEcho[e]! * shots + shot;

  const blocks: Block[] = [];
  const echoTimes = new Float64Array(pe.lines).fill(NaN);
  const table: { line: number; area: number }[] = [];
  const total = p.dummyScans + shots * p.averages;
  const g1 = esp / 2 - h1, g2 = esp / 2 - h2, g3 = esp / 2 - h3;
  for (let n = 0; n < total; n++) {
    const acq = n - p.dummyScans;
    const shot = acq >= 0 ? Math.floor(acq / p.averages) : 0;
    pushPulse(blocks, exc, 0);
    blocks.push({ kind: "free", duration: l1.duration + g1, area: [aPre, 0, crush - exc.areaAfterCentre] });
    for (let e = 0; e < etl; e++) {
      const line = lineOf(shot, e);
      const peArea = acq >= 0 ? (line - pe.centre) * pe.step : 0;
      pushPulse(blocks, ref, Math.PI / 2);
      blocks.push({ kind: "free", duration: l2.duration + g2, area: [0, peArea, crush] });
      if (acq >= 0) {
        pushReadout(blocks, ro, line, 0, 1 / p.averages);
        echoTimes[line] = (e + 1) * esp;
        if (acq % p.averages === 0) table.push({ line, area: peArea });
      } else pushReadoutSilent(blocks, ro);
      blocks.push({ kind: "free", duration: l3.duration + (e < etl - 1 ? g3 : 0), area: [yArea, -peArea, crush] });
    }
    if (trDelay > 0) blocks.push({ kind: "free", duration: trDelay, area: [0, 0, 0] });
    blocks.push({ kind: "spoil" });
  }
  const derived = commonDerived(p, ro, pe, exc, demand);
  const scanTime = total * p.tr;
  derived["echoSpacing"] = { value: esp, unit: "s", note: "between refocusing centres (= between echoes)" };
  derived["echoSpacingMin"] = { value: espMin, unit: "s" };
  derived["echoTrainLength"] = { value: etl, unit: "echoes" };
  derived["shots"] = { value: shots, unit: "excitations", note: "acquired lines / echo train length" };
  derived["effectiveTe"] = { value: (ec + 1) * esp, unit: "s", note: `echo ${ec + 1} of the train reads k = 0 (${p.echoOrder} order)` };
  derived["teMin"] = { value: espMin, unit: "s", note: "first echo at the shortest echo spacing" };
  derived["trMin"] = { value: active, unit: "s" };
  derived["crusherArea"] = { value: crush, unit: "T·s/m" };
  derived["prephaserDuration"] = { value: l1.duration, unit: "s", note: "read prephaser before the first refocusing pulse" };
  derived["prephaserReadAmplitude"] = { value: l1.trap[0]!.amplitude, unit: "T/m" };
  derived["scanTime"] = { value: scanTime, unit: "s" };
  return {
    name: "2D RARE (fast spin echo)",
    pulses: [exc.pulse, ref.pulse],
    blocks,
    kspace: { slice: 1, phase: pe.lines, read: ro.samples },
    image: { slice: 1, phase: p.matrix.phase, read: p.matrix.read },
    centre: { read: ro.echoSample, phase: pe.centre },
    timing: { teMin: espMin, trMin: active, te: (ec + 1) * esp, tr: p.tr, scanTime },
    derived,
    quantities: { sliceGradient: exc.pulse.gradient, refocusGradient: ref.pulse.gradient, echoSpacing: esp },
    grid: {
      read: ro.full, offset: ro.offset, reversed: ro.polarity < 0 ? new Uint8Array(pe.lines).fill(1) : null,
      partialFourier: { ...p.partialFourier }, phaseFirst: pe.first, threeD: false,
    },
    phaseTable: table,
    activeTime: active,
    echoTimes,
  };
}

export const RARE: SequenceDefinition = {
  name: "rare", description: "2D RARE / fast spin echo (echo train)", build: buildRare,
  defaults: { flip: Math.PI / 2, echoTrainLength: 8 }, refocuses: () => true, spoils: true, threeD: false,
};
