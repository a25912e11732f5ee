/**
 * `isofold dataset`: batches of multi-coil raw k-space with their ground
 * truth for people who test reconstruction code. Wiring only; the physics is
 * in src/dataset/.
 */
import { Command } from "commander";
import { existsSync, readFileSync, rmdirSync } from "node:fs";
import { join, resolve } from "node:path";
import { UserError } from "../errors.js";
import { logicalAxes, type Protocol } from "../protocol/index.js";
import { loadPhantom, loadProtocol, readRealNpy } from "./inputs.js";
import { phantomBounds, type Phantom } from "../phantom/index.js";
import { buildSequence } from "../sequence/index.js";
import { FFT_CONVENTION_TEXT } from "../recon/convention.js";
import { quantity } from "../units.js";
import {
  applyPerturbation, buildCase, caseDirName, checkMaskOptions, cholesky, cellsEnclosureMargin, coilCount, drawPerturbation, enclosureMargin,
  loopPlacement, pixelCentres, sliceStepCentre, sensitivitiesAt, simulateCoilsPlanned, neighbourCovariance, physicalSigma, simulateCoils, snrFactor, snrSigma, toImageGrid, FIELD_EXPONENT, type SnrFactors, parseVary, parseCovariance, sensitivityScale, MASK_KINDS, DATASET_FORMATS, Rng, STREAM, type DatasetFormat,
  type CMatrix, type CoilArray, type MaskKind, type MaskOptions, type Perturbation, type VarySpec,
} from "../dataset/index.js";
import { addSimulationOptions, chunkIsochromatsFromEnv, collect, isoOptions, wasmFromEnv } from "./options.js";
import { encodeNpy } from "../io/npy.js";
import { encodeGrayPng } from "../io/png.js";
import { axesFromAffine } from "../io/run-folder.js";
import { displayTransform, toDisplay } from "../report/display.js";
import { prepare, printWarnings, sampledLimits, tissueReport, version, voxelAffine, SAFETY_NOTE, type RunOptions } from "./pipeline.js";
import { Progress } from "./progress.js";
import { withOutputDir } from "../io/outpath.js";
import { mergeDatasetParts, runBatch, sha256 } from "../io/dataset-folder.js";
import { defaultWorkers } from "./memory.js";
import { nodeExecutor } from "../engine/pool.js";
import { nodePhaseHelper } from "../engine/fast-node.js";
import { spreadSummary, t2primeClosedAnywhere } from "../api.js";

export interface DatasetCliOptions {
  /** Engine worker threads (from the shared simulation options). */
  workers?: number;
  shard?: [number, number];
  protocol: string;
  set: string[];
  out: string;
  coils: string;
  coilRows: string;
  loopRadius?: string;
  arrayRadius?: string;
  rowSpacing?: string;
  noiseCorrelation: string;
  noiseCovariance?: string;
  snr?: string;
  noiseLines: string;
  mask: string;
  accel?: string;
  acs?: string;
  partialFourier: string;
  count: string;
  vary: string[];
  seed: number;
  density: number;
  sliceIsochromats: number;
  sliceExtent: number;
  fatModel: "single" | "multi";
  quiet?: boolean;
  format: string;
  cases?: string;
  noiseModel: string;
  snrReference?: string;
  exact?: boolean;
  /** Readout operator and its tolerance (the shared simulation options, as for simulate). */
  readout?: "auto" | "fast" | "direct";
  tolerance?: number;
  /** --max-memory in GiB (the shared simulation option): refuse a case whose estimated memory exceeds it. */
  maxMemory?: number;
}

/** Engine options of a dataset run: environment switches and the readout operator. */
function datasetEngine(o: DatasetCliOptions) {
  return { chunkIsochromats: chunkIsochromatsFromEnv(), wasm: wasmFromEnv(), ...(o.readout ? { readout: o.readout } : {}), ...(o.tolerance !== undefined ? { tolerance: o.tolerance } : {}) };
}

/** Ψ from a file (.npy or JSON; dataset/noise.ts parseCovariance); errors name `option`. */
export function readCovariance(file: string, coils: number, option: string): CMatrix {
  let bytes: Uint8Array;
  try {
    bytes = new Uint8Array(readFileSync(file));
  } catch (e) {
    const code = (e as NodeJS.ErrnoException).code;
    const why = code === "ENOENT" ? "no such file" : code === "EISDIR" ? "it is a directory" : code ?? (e as Error).message;
    throw new UserError(`cannot read ${file}: ${why}; give the coil noise covariance as .npy [coils, coils] or JSON rows`, undefined, option);
  }
  return parseCovariance(bytes, file, coils, option);
}

function int(raw: string, option: string, min: number, max: number): number {
  const n = Number(raw);
  if (!Number.isInteger(n) || n < min || n > max) throw new UserError(`expected a whole number from ${min} to ${max}, got "${raw}"`, undefined, option);
  return n;
}
function num(raw: string, option: string, min: number, max: number, what = "a number", range = `from ${min} to ${max}`): number {
  const n = Number(raw);
  if (raw.trim() === "" || !Number.isFinite(n) || n < min || n > max) throw new UserError(`expected ${what} ${range}, got "${raw}"`, undefined, option);
  return n;
}
function length(raw: string, option: string): number {
  const v = quantity(raw.replace(/^(-?[0-9.eE+]+)([a-zA-Z])/, "$1 $2"), "length", { path: option });
  if (!(v > 0)) throw new UserError(`must be greater than zero, got "${raw}"`, undefined, option);
  return v;
}

/** Largest in-plane distance (m) of the phantom's bounding box from the z axis, along x or y. */
function halfExtent(ph: Phantom, fallback: number): number {
  const b = phantomBounds(ph);
  const v = [b.min[0], b.max[0], b.min[1], b.max[1]].map((x) => (Number.isFinite(x) ? Math.abs(x) : fallback));
  return Math.max(...v);
}

/** Worst distance (m) beyond a loop plane of object points in the slice plane (sampled on a 128×128 grid). */
function sampledMargin(ph: Phantom, protocol: Protocol, array: CoilArray): number {
  const ax = logicalAxes(protocol);
  const b = phantomBounds(ph);
  // the same limits the isochromat sampler uses (pipeline sampledLimits)
  const lim = sampledLimits(protocol);
  const proj = (d: number[], clipAt: number, unbounded: number) => {
    let lo = 0, hi = 0;
    for (let k = 0; k < 3; k++) {
      if (d[k] === 0) continue;
      lo += Math.min(b.min[k]! * d[k]!, b.max[k]! * d[k]!);
      hi += Math.max(b.min[k]! * d[k]!, b.max[k]! * d[k]!);
    }
    const clip = Number.isFinite(lo) && Number.isFinite(hi) ? clipAt : Math.min(clipAt, unbounded);
    return [Math.max(lo, -clip), Math.min(hi, clip)] as const;
  };
  const [u0, u1] = proj(ax.read, lim.clipRead, lim.unboundedRead), [v0, v1] = proj(ax.phase, lim.clipPhase, lim.unboundedPhase);
  const xs: number[] = [], ys: number[] = [];
  const n = 128, w = protocol.slice.position;
  for (let i = 0; i <= n; i++) {
    for (let j = 0; j <= n; j++) {
      const u = u0 + ((u1 - u0) * i) / n, v = v0 + ((v1 - v0) * j) / n;
      const x = ax.read[0] * u + ax.phase[0] * v + ax.slice[0] * w;
      const y = ax.read[1] * u + ax.phase[1] * v + ax.slice[1] * w;
      const z = ax.read[2] * u + ax.phase[2] * v + ax.slice[2] * w;
      if (ph.shapes.some((s) => ph.tissues[s.tissue]!.pd > 0 && s.contains(x, y, z))) {
        xs.push(x);
        ys.push(y);
      }
    }
  }
  return enclosureMargin(array, xs, ys, xs.length);
}

export interface CoilCliOptions {
  coils: string;
  coilRows: string;
  loopRadius?: string;
  arrayRadius?: string;
  rowSpacing?: string;
}

/**
 * The receive array of --coils and the loop options (uniform coil for 1):
 * defaults from the phantom's extent (plus perturbation ranges); every
 * phantom in `phantoms` must lie inside the loops.
 */
export function planCoilArray(o: CoilCliOptions, phantom: Phantom, protocol: Protocol, vary: VarySpec, phantoms: Phantom[]): CoilArray {
  const nCoils = int(o.coils, "--coils", 1, 256);
  const rows = int(o.coilRows, "--coil-rows", 1, 64);
  if (nCoils % rows !== 0) throw new UserError(`${nCoils} coils do not split into ${rows} equal rows; give a multiple of ${rows}`, undefined, "--coils");
  if (nCoils === 1 && (o.loopRadius || o.arrayRadius || o.rowSpacing || rows > 1)) {
    throw new UserError("coil geometry options need an array of loops; add --coils N with N ≥ 2 (--coils 1 is the uniform body coil)", undefined, "--coils");
  }
  let array: CoilArray = { elements: 0, rows: 1, loopRadius: 0, arrayRadius: 0, rowSpacing: 0, zCentre: 0 };
  if (nCoils > 1) {
    const elements = nCoils / rows;
    const h = halfExtent(phantom, protocol.fov.phase) * (1 + vary.size) + Math.SQRT2 * vary.position;
    const arrayRadius = o.arrayRadius ? length(o.arrayRadius, "--array-radius") : 1.15 * h + 0.01;
    const loopRadius = o.loopRadius ? length(o.loopRadius, "--loop-radius") : Math.min((Math.PI * arrayRadius) / elements, 0.8 * arrayRadius);
    const rowSpacing = o.rowSpacing ? length(o.rowSpacing, "--row-spacing") : 1.8 * loopRadius;
    const ax = logicalAxes(protocol);
    array = { elements, rows, loopRadius, arrayRadius, rowSpacing, zCentre: ax.slice[2] * protocol.slice.position };
    const count = phantoms.length;
    phantoms.forEach((ph, i) => {
      const m = sampledMargin(ph, protocol, array);
      if (m >= 0) {
        throw new UserError(
          `the coil array of radius ${(arrayRadius * 100).toFixed(1)} cm does not enclose the object${count > 1 ? ` of case ${i}` : ""}: ` +
            `part of it lies ${(m * 100).toFixed(1)} cm beyond a loop; give a larger --array-radius (at least ${((arrayRadius + m) * 100 + 1).toFixed(0)} cm)`,
          undefined, "--array-radius",
        );
      }
    });
  }
  return array;
}

interface Plan {
  protocol: Protocol;
  phantoms: Phantom[];
  perturbations: Perturbation[];
  array: CoilArray;
  psi: CMatrix;
  psiSource: string;
  snr: number | null;
  noiseLines: number;
  mask: MaskOptions;
  count: number;
  vary: VarySpec;
  format: DatasetFormat;
  /** Cases A … B−1 only (--cases A:B), or null for all. */
  range: [number, number] | null;
  /** --noise-model physical: the reference protocol (SNR = snr there on this phantom). */
  reference: Protocol | null;
}

/** Validates every flag and file before any work; throws UserError. */
export function planDataset(phantomFile: string, o: DatasetCliOptions): Plan {
  if (o.shard) throw new UserError("--shard splits one simulate run; a dataset batch runs its cases one after another on the worker pool (use --workers)", undefined, "--shard");
  const protocol = loadProtocol(o.protocol, o.set);
  if (protocol.slices.count > 1) {
    throw new UserError(`datasets hold one slice or one 3D slab; set slices.count to 1 (or use a 3D protocol)`, o.protocol, "slices.count");
  }
  if (protocol.partialFourier.phase < 1 || protocol.partialFourier.read < 1) {
    throw new UserError(`datasets apply partial Fourier as a sampling mask; set partialFourier to 1 and pass --partial-fourier instead`, o.protocol, "partialFourier");
  }
  let seq;
  try {
    seq = buildSequence(protocol);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(o.protocol);
    throw e;
  }
  const phantom = loadPhantom(phantomFile, protocol.field, { readArray: readRealNpy });
  const count = int(o.count, "--count", 1, 100000);
  let range: [number, number] | null = null;
  if (o.cases !== undefined) {
    const m = /^\s*(\d+)\s*:\s*(\d+)\s*$/.exec(o.cases);
    const a = m ? Number(m[1]) : NaN, b = m ? Number(m[2]) : NaN;
    if (!m || !(a < b) || b > count) {
      throw new UserError(`"${o.cases}" is not a range of cases within --count ${count}; write A:B with 0 ≤ A < B ≤ ${count} (cases A … B−1), e.g. 0:${Math.min(count, 10)}`, undefined, "--cases");
    }
    range = [a, b];
  }
  const format = (o.format ?? "both") as DatasetFormat;
  if (!(DATASET_FORMATS as readonly string[]).includes(format)) throw new UserError(`unknown format "${o.format}"; use one of ${DATASET_FORMATS.join(", ")}`, undefined, "--format");
  const vary = parseVary(o.vary);
  // mask
  if (!(MASK_KINDS as readonly string[]).includes(o.mask)) throw new UserError(`unknown mask "${o.mask}"; use one of ${MASK_KINDS.join(", ")}`, undefined, "--mask");
  const kind = o.mask as MaskKind;
  const phaseLines = seq.image.phase;
  const mask: MaskOptions = {
    kind,
    accel: o.accel === undefined ? (kind === "full" ? 1 : 4) : num(o.accel, "--accel", 1, Number.MAX_SAFE_INTEGER, "an acceleration", `of at least 1 (phase lines / lines sampled), e.g. 4`),
    acs: o.acs === undefined ? (kind === "full" ? 0 : Math.min(24, Math.floor(phaseLines / 4))) : int(o.acs, "--acs", 0, Number.MAX_SAFE_INTEGER),
    partialFourier: num(o.partialFourier, "--partial-fourier", 0, 1, "a fraction"),
    ...(o.exact ? { exact: true } : {}),
  };
  checkMaskOptions(mask, seq.image.slice, seq.image.phase);
  const perturbations: Perturbation[] = [];
  const phantoms: Phantom[] = [];
  for (let i = 0; i < count; i++) {
    const p = drawPerturbation(vary, phantom, Rng.stream(o.seed, i, STREAM.perturb));
    perturbations.push(p);
    phantoms.push(applyPerturbation(phantom, p));
  }
  const array = planCoilArray(o, phantom, protocol, vary, phantoms);
  // noise
  const C = coilCount(array);
  let psi: CMatrix, psiSource: string;
  if (o.noiseCovariance !== undefined) {
    if (o.noiseCorrelation !== "0") throw new UserError("give either --noise-covariance or --noise-correlation, not both", undefined, "--noise-covariance");
    psi = readCovariance(o.noiseCovariance, C, "--noise-covariance");
    psiSource = `file ${resolve(o.noiseCovariance)}`;
    cholesky(psi, "--noise-covariance");
  } else {
    const rho = num(o.noiseCorrelation, "--noise-correlation", -1, 1, "a correlation coefficient");
    psi = neighbourCovariance(array, rho);
    psiSource = `ones on the diagonal, ${rho} between neighbouring elements (previous/next loop of a row around the ring, same loop of adjacent rows), 0 elsewhere`;
    cholesky(psi, "--noise-correlation");
  }
  const snr = o.snr === undefined ? null : num(o.snr, "--snr", 1e-6, 1e12, "a signal-to-noise ratio", "above 0 (at least 1e-6, at most 1e12), e.g. 30");
  const noiseLines = int(o.noiseLines, "--noise-lines", 0, 1 << 20);
  if (noiseLines > 0 && snr === null) throw new UserError("noise-only lines need a noise level; add --snr X", undefined, "--noise-lines");
  if (snr === null && (o.noiseCovariance !== undefined || Number(o.noiseCorrelation) !== 0)) {
    // without --snr the k-space is noise-free: a covariance would shape nothing (and case.json would list one that was never used)
    const opt = o.noiseCovariance !== undefined ? "--noise-covariance" : "--noise-correlation";
    throw new UserError(`the coil noise covariance shapes the noise, but without --snr the k-space is noise-free; add --snr X (or drop ${opt})`, undefined, opt);
  }
  let reference: Protocol | null = null;
  if (o.noiseModel !== "snr" && o.noiseModel !== "physical") throw new UserError(`unknown noise model "${o.noiseModel}"; use snr (the SNR of this protocol) or physical (scaled from --snr-reference)`, undefined, "--noise-model");
  if (o.noiseModel === "physical") {
    if (o.snrReference === undefined || snr === null) {
      const missing = o.snrReference === undefined && snr === null ? "--snr-reference <protocol> --snr X" : o.snrReference === undefined ? "--snr-reference <protocol>" : "--snr X";
      throw new UserError(`the physical noise model needs a reference protocol and its SNR: add ${missing}${snr === null ? " (X = the SNR the reference protocol has on this phantom)" : ` (the protocol whose SNR on this phantom is ${snr})`}`, undefined, "--noise-model");
    }
    try {
      reference = loadProtocol(o.snrReference, []);
    } catch (e) {
      // name the option: the same file name may also be the main --protocol
      if (e instanceof UserError && !e.file) throw new UserError(e.detail, undefined, "--snr-reference");
      throw e;
    }
  } else if (o.snrReference !== undefined) {
    throw new UserError("--snr-reference sets the physical noise model's reference; add --noise-model physical, or drop it", undefined, "--snr-reference");
  }
  return { protocol, phantoms, perturbations, array, psi, psiSource, snr, noiseLines, mask, count, vary, format, range, reference };
}

const RAW_H5_TEXT = "ISMRMRD (HDF5: dataset/xml header, dataset/data one record per readout): noise-only readouts first (--noise-lines), then every sampled line as acquired with read oversampling kept; relation to kspace.npy under rawH5";

/** How raw.h5 relates to kspace.npy, for case.json (the construction is in src/dataset/raw.ts). */
function rawH5Relation(p: Protocol, M: number, N: number): Record<string, unknown> {
  return {
    readSamples: M, readOversampling: p.oversampling.read, imageRead: N,
    relation: `per coil and sampled line (slice-encoding step e2 = kspace_encode_step_2, phase line e1 = kspace_encode_step_1): ` +
      `ifftc_M(raw line)[x + ${Math.floor(M / 2) - Math.floor(N / 2)}] = ifftc_N(kspace.npy[c, e2, e1, :])[x] for x = 0…${N - 1}, ` +
      `ifftc the centred inverse DFT with 1/n (fftConvention); so raw samples are about M/N = ${(M / N).toFixed(3)} times the kspace.npy samples, ` +
      `the oversampled margin of the read field of view holds the object and independent noise of the same per-pixel variance`,
    noise: "per raw sample σ²·M/N·Ψ (the sampled bandwidth is M/N times wider at the same readout duration); inside the read field of view the noise is exactly that of kspace.npy; noise-only readouts relate to noise.npy the same way",
    lines: "one acquisition per sampled line of mask.npy and average (dropped lines are absent); phase oversampling removed (lines on the image phase grid); reversed readouts turned round into k-space order",
    averages: `${p.averages} record${p.averages === 1 ? "" : "s"} per sampled line, idx.average = 0 … ${p.averages - 1} (encoding limit average maximum ${p.averages - 1}), the averages of a line one after another; ` +
      "the noise-free signal of each is the simulated mean over the averages (the engine adds the averages of a line with weight 1/averages), the noise of each is independent with covariance averages·σ²·Ψ per image-grid sample, " +
      "and the mean over the averages of the records of a line relates to kspace.npy by the relation above (kspace.npy holds the averaged line, noise σ²·Ψ)",
    frame: "read_dir, phase_dir, slice_dir and position (mm, centre of the slice or slab) in the ISMRMRD patient frame: x toward the subject's left, y posterior, z superior (RAS+ x and y negated); " +
      "image pixel n of an in-plane axis of N points at position + (n − floor(N/2))·Δ along read_dir or phase_dir, slice-encoding step p of P at position + (p − (P−1)/2)·thickness along slice_dir",
    recon: "ismrmrd_recon_cartesian_2d (2D, full sampling) gives M·N_phase × the root-sum-of-squares of the kspace.npy coil images: it uses an unnormalised inverse FFT",
    flags: "first/last in encode step 1 per slice-encoding step; first/last in encode step 2, slice, average and repetition on the first/last imaging readout; last in measurement; ACS lines: parallel calibration, plus parallel calibration and imaging when the line also belongs to the undersampled pattern (uniform: the lattice; random, poisson: every ACS line)",
  };
}

function round(v: number, d = 9): number {
  return Number(v.toPrecision(d));
}

/** The factors of the physical noise model of a protocol (noise.ts). */
function snrFactorsOf(p: Protocol, seq: { kspace: { slice: number; phase: number } }): SnrFactors {
  return {
    voxel: (p.fov.read / p.matrix.read) * (p.fov.phase / p.matrix.phase) * p.slice.thickness,
    acquisition: p.averages * seq.kspace.phase * seq.kspace.slice / p.pixelBandwidth,
    field: p.field,
  };
}

/**
 * σ of the physical noise model: the reference protocol is simulated once on
 * the unperturbed phantom (one uniform coil) for its mean object signal A_ref,
 * then σ follows from the factors (noise.ts physicalSigma).
 */
async function physicalNoise(phantomFile: string, reference: Protocol, refName: string, snr: number, protocol: Protocol, iso: ReturnType<typeof isoOptions>, o: DatasetCliOptions) {
  const ref = prepare({ phantom: phantomFile, protocol: refName, sets: [], out: o.out, seed: o.seed, iso, quiet: true });
  const k = await simulateCoils(ref.seq, ref.iso, { elements: 0, rows: 1, loopRadius: 0, arrayRadius: 0, rowSpacing: 0, zCentre: 0 }, reference.receiverFilter, nodeExecutor(o.workers ?? defaultWorkers()), undefined, datasetEngine(o));
  const img = ref.seq.image;
  const v = toImageGrid(k.re, k.im, 1, ref.seq.kspace, img, ref.seq.grid);
  const meanSignal = snrSigma(v.re, v.im, 1).meanSignal;
  const refFactors = snrFactorsOf(reference, ref.seq);
  const seq = buildSequence(protocol);
  const own = snrFactorsOf(protocol, seq);
  const points = seq.image.slice * seq.image.phase * seq.image.read;
  const sigma = physicalSigma({ meanSignal, snr, factors: refFactors }, own, points);
  return {
    sigma,
    report: {
      reference: { protocol: refName, snr, meanSignalA: meanSignal, voxelM3: refFactors.voxel, samplingTimeS: refFactors.acquisition, fieldT: refFactors.field },
      own: { voxelM3: own.voxel, samplingTimeS: own.acquisition, fieldT: own.field },
      rule: "σ_img = σ/√N = (A_ref/SNR_ref) · (V_ref·√T_ref·B0_ref^β) / (V·√T·B0^β); V voxel volume of the image grid, T = averages × phase lines (with phase oversampling) × slice-encoding steps × readout duration (1/pixel bandwidth); " +
        "the reference simulated once on the unperturbed phantom with one uniform coil; per coil the noise covariance is σ²·Ψ",
      fieldExponent: FIELD_EXPONENT,
      fieldExponentSource: "β = 1: sample-noise-dominated regime (D. I. Hoult, R. E. Richards, J. Magn. Reson. 24 (1976) 71–85); common practice at clinical field strengths",
      volumeTimeSource: "SNR ∝ voxel volume · √(total sampling time) (W. A. Edelstein et al., Magn. Reson. Med. 3 (1986) 604–618); common practice",
      snrRatioToReference: (snrFactor(own) / snrFactor(refFactors)),
    },
  };
}

/** Runs the batch; returns the made and skipped case numbers. */
export async function runDataset(phantomFile: string, o: DatasetCliOptions): Promise<{ made: number[]; skipped: number[]; seconds: number }> {
  const t0 = Date.now();
  const plan = planDataset(phantomFile, o);
  const { protocol, array } = plan;
  // the fast readout operator's helper thread (engine/fast-node.ts) starts now, as in simulate (pipeline.ts),
  // so that it is up when the first case's engine gets there
  if (o.readout !== "direct" && (o.workers ?? defaultWorkers()) >= 2 && protocol.matrix.read * protocol.matrix.phase >= 128 * 128) nodePhaseHelper();
  const asked = isoOptions(o);
  // one T2′ model for the whole batch (every part of it decides alike: plan.phantoms holds every case): where "auto"
  // takes the closed form for some case, every case takes it
  const iso = (asked.t2primeModel ?? "auto") === "auto" && t2primeClosedAnywhere(protocol, plan.phantoms, asked) ? { ...asked, t2primeModel: "closed-form" as const } : asked;
  const axes = logicalAxes(protocol);
  const C = coilCount(array);
  const batchKey = sha256(JSON.stringify({
    version: version(), phantom: sha256(readFileSync(phantomFile)), protocol, iso, array, psi: [Array.from(plan.psi.re), Array.from(plan.psi.im)],
    snr: plan.snr, noiseLines: plan.noiseLines, mask: plan.mask, vary: plan.vary, seed: o.seed, format: plan.format,
    readout: o.readout ?? "auto", tolerance: o.tolerance ?? null,
    ...(plan.reference ? { reference: plan.reference } : {}),
  }));
  // the reference scan is simulated as a run of its own would be (its own T2′ model), whatever this batch's protocol decides
  const physical = plan.reference ? await physicalNoise(phantomFile, plan.reference, o.snrReference!, plan.snr!, protocol, asked, o) : null;
  const files: Record<string, string> = {
    "kspace.npy": "complex64 [coil, slice, phase, read]: k-space on the image grid (read oversampling removed), noise added, zero where mask.npy is 0",
    "mask.npy": "uint8 [slice, phase]: 1 where the whole readout line was sampled",
    "sensitivities.npy": "complex64 [coil, slice, phase, read]: receive sensitivities S_c at the image pixel centres",
    "truth.npy": "complex64 [2, slice, phase, read]: [0] noise-free image with one uniform coil (S = 1); [1] noise-free coil-combined image Σ_c conj(S_c)·I_c / Σ_c |S_c|² of the simulated coil images I_c",
    "noise_covariance.npy": "complex64 [coil, coil]: covariance E[n·nᴴ] of the noise added to each k-space sample (σ²·Ψ; all zero when noise-free)",
    "truth.nii": "NIfTI-1 float32 |truth[0]|, x = read, y = phase, z = slice-encoding step, voxel sizes in mm, RAS+ affine",
    "case.json": "this file",
  };
  if (plan.noiseLines > 0) files["noise.npy"] = "complex64 [coil, line, read]: noise-only samples from the same distribution as the k-space noise (a prescan)";
  if (plan.format === "ismrmrd") {
    delete files["kspace.npy"];
    delete files["noise.npy"];
  }
  if (plan.format !== "npy") files["raw.h5"] = RAW_H5_TEXT;
  const placement = loopPlacement(array);
  /** Warnings already printed on stderr in this batch (each prints once). */
  const printed = new Set<string>();
  const result = await runBatch(resolve(o.out), plan.count, o.seed, (i) => sha256(`${batchKey}:${i}`), async (i) => {
    // the isochromats are made only if the stored path runs (prepared.iso): the fast operator streams the cells
    const prepared = prepare({
      phantom: phantomFile, protocol: o.protocol, sets: o.set, out: o.out, seed: o.seed, iso, quiet: o.quiet,
      phantomTransform: () => plan.phantoms[i]!,
      // the memory check of simulate, for this case's coils (--max-memory was read but not used before)
      workers: o.workers, memoryCoils: C, ...(o.maxMemory !== undefined ? { maxMemory: o.maxMemory * 2 ** 30 } : {}),
    });
    const { seq, phantom: casePhantom, cells: set } = prepared;
    const warnings = [...protocol.warnings, ...set.warnings];
    printWarnings(warnings.filter((w) => !printed.has(w)));
    for (const w of warnings) printed.add(w);
    if (array.elements > 0) {
      const m = cellsEnclosureMargin(array, set);
      if (m >= 0) throw new UserError(`the coil array does not enclose the object of case ${i}: isochromats lie ${(m * 100).toFixed(2)} cm beyond a loop; give a larger radius`, undefined, "--array-radius");
    }
    const progress = new Progress(`case ${i + 1}/${plan.count}`, "chunk", o.quiet);
    const dx = protocol.fov.read / protocol.matrix.read, dy = protocol.fov.phase / protocol.matrix.phase;
    const sim = await simulateCoilsPlanned(seq, prepared, array, protocol.receiverFilter, nodeExecutor(o.workers ?? defaultWorkers()), (d, t) => progress.update(d, t), datasetEngine(o));
    const r = buildCase(seq, sim, {
      axes, dx, dy, dz: protocol.slice.thickness, position: protocol.slice.position,
      // index 0 of the slice axis at its step centre (a 3D slab's steps tile the slab around the slice position), as simulate's image.nii
      affine: voxelAffine(protocol, protocol.slice.thickness * 1e3, sliceStepCentre(0, seq.image.slice, protocol.slice.thickness, protocol.slice.position) * 1e3),
      voxelMm: [dx * 1e3, dy * 1e3, protocol.slice.thickness * 1e3],
    }, {
      array, psi: plan.psi, snr: plan.snr, noiseLines: plan.noiseLines, mask: plan.mask, seed: o.seed,
      ...(physical ? { sigma: physical.sigma } : {}),
      format: plan.format, raw: { protocol, seq, axes, mask: plan.mask }, rawComment: `isofold ${version()} dataset case ${i}, seed ${o.seed}; synthetic data from a Bloch simulation, not a measurement`,
    }, i);
    progress.done();
    const p = plan.perturbations[i]!;
    const params = {
      perturbation: {
        shiftM: p.shift.map((v) => round(v)), rotationRad: round(p.rotation), sizeFactor: p.sizeFactor.map((v) => round(v)),
        t1Factor: p.t1Factor.map((v) => round(v)), t2Factor: p.t2Factor.map((v) => round(v)), pdFactor: p.pdFactor.map((v) => round(v)),
        b0: { f0Hz: round(p.b0.f0), gxHzPerM: round(p.b0.gx), gyHzPerM: round(p.b0.gy) },
      },
      coils: C, mask: plan.mask.kind, acceleration: round(r.info.mask.acceleration, 6), snr: plan.snr, sigma: round(r.info.sigma),
      ...(physical ? { noiseModel: "physical" } : {}),
    };
    const m = r.info.mask;
    const caseJson = {
      tool: { name: "isofold", version: version() },
      safety: SAFETY_NOTE,
      case: i,
      seed: o.seed,
      random: "xoshiro128** seeded by SplitMix64 from (seed, case, purpose); purposes: perturbation 1, mask 2, noise 3, noise-only lines 4",
      inputs: { phantom: resolve(phantomFile), protocol: o.protocol, set: o.set },
      files,
      axes: {
        order: "C order (last index fastest); dims [coil, slice, phase, read]",
        physical: { read: axes.names.read, phase: axes.names.phase, slice: axes.names.slice, frame: "RAS+ (x toward the subject's right, y anterior, z superior)" },
        index: "index n along an in-plane axis of N points sits at (n − floor(N/2))·Δ along the positive physical direction named above; k-space index m at k = (m − floor(N/2))·Δk, Δk·Δ = 1/N; " +
          "along the slice axis the P slice-encoding steps of a 3D slab tile the slab centred at the slice position: step p sits at position + (p − (P−1)/2)·thickness (truth.nii, sensitivities.npy and raw.h5 use these centres)",
        imageGrid: { slice: r.info.dims.slice, phase: r.info.dims.phase, read: r.info.dims.read },
        pixelM: { read: round(dx), phase: round(dy), slice: protocol.slice.thickness },
        acquiredKspace: r.info.kspaceAcquired,
      },
      fftConvention: FFT_CONVENTION_TEXT,
      kspace: "kspace.npy holds the centred forward DFT (no 1/N; recon/fft.ts fft*c) of each simulated coil image on the image grid, so " +
        "numpy: coil_images = fftshift(ifftn(ifftshift(kspace, axes=(-3,-2,-1)), axes=(-3,-2,-1)), axes=(-3,-2,-1)) gives the coil images exactly, with no cropping; " +
        "with one slice-encoding step the slice axis has length 1 and the transform over it is the identity. The simulation itself sampled " +
        `${r.info.kspaceAcquired.read} read points (read oversampling ${protocol.oversampling.read}); those were transformed to the image, the central ${r.info.dims.read} kept, and transformed back.`,
      ...(plan.format !== "npy" ? { rawH5: rawH5Relation(protocol, seq.grid.read, r.info.dims.read) } : {}),
      engine: {
        readout: r.info.readout.length === 1 ? r.info.readout[0]! : r.info.readout,
        readoutNote: "what the readout operator did, as report.json engine.readout of simulate: operator used, operator requested (--readout), tolerance (relative L2 of k-space), fallback reason if the direct operator ran instead of the fast one; one report per engine run when the coils are simulated in several blocks",
      },
      imageScale: "a voxel full of tissue with PD 1, fully relaxed and tipped by 90°, is about 1 in truth[0]",
      coils: array.elements === 0
        ? { kind: "uniform", count: 1, sensitivity: "S = 1 everywhere" }
        : {
          kind: "circular loops", count: C, loopsPerRow: array.elements, rows: array.rows,
          loopRadiusM: round(array.loopRadius), arrayRadiusM: round(array.arrayRadius), rowSpacingM: round(array.rowSpacing), zCentreM: round(array.zCentre),
          loops: placement.map((l, q) => ({ coil: q, centreM: l.centre.map((v) => round(v)), normal: l.normal.map((v) => round(v)) })),
          placement: "loop j of row r centred at (R·cosφ, R·sinφ, zc + (r − (rows−1)/2)·rowSpacing), φ = 2πj/loopsPerRow, normal radial; coil index = r·loopsPerRow + j",
          sensitivity: "S_c(r) = (Bx − i·By)(r)/κ, B = Biot–Savart field per unit current of loop c (exact elliptic-integral form); by reciprocity for Mxy = Mx + i·My precessing as exp(−iω0t)",
          kappa: round(sensitivityScale(array)),
          normalisation: "κ makes sqrt(Σ_c |S_c|²) = 1 at the array centre (0, 0, zc)",
          simulation: "each coil's signal is simulated with S_c applied to every isochromat before the readout (not multiplied in afterwards); sensitivities.npy samples S_c at the pixel centres, so truth[1] differs from truth[0] by the sensitivity variation within a voxel and through the slice profile",
        },
      noise: {
        model: "circularly symmetric complex Gaussian, n = σ·L·z per k-space sample, Ψ = L·Lᴴ, z ~ CN(0, I); independent between samples",
        psi: { source: plan.psiSource, re: Array.from(plan.psi.re), im: Array.from(plan.psi.im), rows: C },
        noiseModel: physical ? "physical: σ scaled from the reference protocol (see physical)" : "snr: σ from the SNR of this protocol (--snr)",
        ...(physical ? { physical: { ...physical.report, snrResulting: round(r.info.meanSignal / (r.info.sigma / Math.sqrt(r.info.dims.slice * r.info.dims.phase * r.info.dims.read)), 6) } } : {}),
        snr: physical ? null : plan.snr,
        snrDefinition: "SNR = A / (σ/√N): A = mean |truth[0]| over pixels with |truth[0]| ≥ 0.1·max|truth[0]|, N = number of image-grid points; σ/√N is the complex standard deviation (sqrt E|ε|²) of a pixel reconstructed from one coil's noise with Ψ_cc = 1 and full sampling",
        sigma: r.info.sigma,
        meanSignalA: r.info.meanSignal,
        objectPixels: r.info.objectPixels,
        noiseOnlyLines: plan.noiseLines,
      },
      mask: {
        kind: plan.mask.kind, accelerationNominal: plan.mask.accel, acsLines: plan.mask.acs, partialFourier: plan.mask.partialFourier,
        sampledFraction: m.sampled, acceleration: m.acceleration,
        ...(m.density ? { density: "p(y) = min(1, λ·(1 − |y − floor(N/2)|/(N/2))²) outside the ACS lines, 1 inside; λ so that Σp = N/R", densityPerLine: Array.from(m.density, (v) => round(v, 6)) } : {}),
        ...(m.radius !== null ? { poissonRadiusLines: round(m.radius, 6) } : {}),
        ...(plan.mask.exact ? { exact: "round(N/R) lines per slice-encoding step: the ACS lines plus lines drawn without replacement with weights p(y) (keys u^(1/p), Efraimidis and Spirakis 2006)" } : {}),
        rule: "see src/dataset/masks.ts: uniform keeps lines with (y − floor(N/2)) mod R = 0 plus the ACS lines [floor(N/2) − floor(ACS/2), … + ACS); partial Fourier removes lines y < N − round(F·N)",
      },
      phantom: { name: plan.phantoms[i]!.name, perturbation: params.perturbation, vary: plan.vary, b0: plan.phantoms[i]!.b0Description },
      protocol: { ...protocol, units: "SI: s, m, T, T/m, T/m/s, Hz, rad" },
      sequence: { name: seq.name, timing: seq.timing },
      isochromats: {
        count: set.count, density: iso.density, sliceCount: iso.sliceCount, sliceExtent: iso.sliceExtent, fatModel: iso.fatModel,
        t2primeIsochromats: iso.t2primeIsochromats, t2primeModel: iso.t2primeModel ?? "auto", t2primeSpread: spreadSummary(set),
        t2primeNote: "the batch's T2′ model: where auto would take the closed form R2* = R2 + R2′ for some case, every case takes it (one model for the batch)",
      },
      tissues: {
        units: "pd relative to pure water; t1, t2, t2star in s (after this case's perturbation); fatFraction 0..1",
        note: "`source` says, for each library value, whether it was checked against the published source, recalled from memory, estimated by a rule or is a design value of our own",
        list: tissueReport(casePhantom),
      },
      warnings,
    };
    r.files.set("case.json", JSON.stringify(caseJson, null, 2) + "\n");
    return { files: r.files, params };
  }, (i, skipped) => {
    if (!o.quiet && skipped) process.stderr.write(`case ${i + 1}/${plan.count}: files verified, skipped\n`);
  }, { ...(plan.range ? { range: plan.range } : {}), batch: batchKey });
  return { ...result, seconds: (Date.now() - t0) / 1000 };
}

export function registerDataset(program: Command): void {
  const cmd = addSimulationOptions(
    addCoilOptions(program
      .command("dataset")
      .description("write a batch of multi-coil raw k-space cases with their ground truth (truth image, coil sensitivities, noise covariance, sampling mask) for testing reconstruction code")
      .argument("<phantom>", "phantom file (JSON), e.g. phantoms/torso-slice.json")
      .requiredOption("-p, --protocol <file>", "protocol file (JSON) or bundled preset name")
      .option("-s, --set <key=value>", "override a protocol value, repeatable", collect, [])
      .requiredOption("-o, --out <dir>", "output folder: manifest.jsonl and one case-NNNN/ folder per case; an interrupted batch resumes here"), "")
      .option("--noise-correlation <rho>", "noise correlation coefficient between neighbouring loops (plain number, |rho| < 0.5 for a ring; needs --snr)", "0")
      .option("--noise-covariance <file>", "coil noise covariance Ψ as .npy [coils, coils] or JSON rows (or {re, im}); Hermitian positive definite; needs --snr")
      .option("--snr <x>", "target SNR (definition in case.json: mean object signal of the uniform-coil image / noise std of one coil's image); default: no noise")
      .option("--noise-model <name>", "snr: --snr is this protocol's SNR; physical: --snr is the SNR of --snr-reference on this phantom, and this protocol's noise follows from voxel volume, √(sampling time) and field strength", "snr")
      .option("--snr-reference <protocol>", "reference protocol (file or preset) of the physical noise model, simulated once on the unperturbed phantom with one uniform coil")
      .option("--noise-lines <n>", "noise-only readouts per coil written to noise.npy (needs --snr)", "0")
      .option("--mask <name>", `sampling mask: ${MASK_KINDS.join(", ")}`, "full")
      .option("--accel <R>", "acceleration (phase lines, or phase-encoding points for poisson, divided by the number sampled); default 4 for undersampling masks")
      .option("--acs <lines>", "fully sampled centre lines along phase; default min(24, phase lines/4) for undersampling masks")
      .option("--exact", "with --mask random: exactly round(N/R) lines per slice-encoding step instead of N/R on average")
      .option("--partial-fourier <F>", "fraction of phase lines kept, in (0.5, 1]; the first lines are dropped", "1")
      .option("--count <n>", "number of cases", "1")
      .option("--cases <A:B>", "make only cases A … B−1 of the --count, with the seeds they have in the whole batch, and write manifest-A-B.jsonl (for job arrays; join the parts with isofold dataset-merge)")
      .option("--format <name>", "raw k-space container: npy (kspace.npy), ismrmrd (raw.h5, the ISMRM raw-data standard) or both", "both")
      .option("--vary <list>", "seeded perturbations per case, ranges ±, drawn uniformly: position (length, whole object in x and y), rotation (angle about z), " +
        "size (fraction or %, per shape), t1, t2, pd (fraction or %, per tissue), b0 (Hz: offset and linear field up to this at 10 cm); " +
        "e.g. position=1cm,rotation=10deg,size=10%,t1=10%,b0=20Hz; repeatable", collect, []),
  );
  // a batch is split by cases (--cases), not by shards; the command refuses --shard, so the help does not list it
  cmd.options.find((x) => x.long === "--shard")?.hideHelp();
  cmd.exitOverride((err) => process.exit(err.exitCode === 0 ? 0 : 2));
  cmd.action(async (phantom: string, o: DatasetCliOptions) => {
    // parts of one batch (--cases A:B) run at the same time into one folder: each locks its own range
    // (<out>/.cases-A-B.lock); a whole batch, and dataset-merge, lock the folder (<out>.lock)
    const part = o.cases !== undefined ? /^\s*(\d+)\s*:\s*(\d+)\s*$/.exec(o.cases) : null;
    const existed = existsSync(o.out);
    let r: Awaited<ReturnType<typeof runDataset>>;
    try {
      r = part
        ? await withOutputDir(join(o.out, `.cases-${Number(part[1])}-${Number(part[2])}`), () => runDataset(phantom, o), "--out")
        : await withOutputDir(o.out, () => runDataset(phantom, o));
    } catch (e) {
      // an input error found at the first case (nothing in the slice, --max-memory, …) leaves no empty
      // folder behind (exit 2: nothing written); rmdir removes only an empty folder, so what a case or
      // another part wrote stays
      if (!existed) {
        try {
          rmdirSync(o.out);
        } catch {
          // not empty, or gone: keep it
        }
      }
      throw e;
    }
    const made = r.made.length;
    const range = o.cases !== undefined ? o.cases.split(":").map((v) => Number(v.trim())) : null;
    console.log(
      `dataset: ${made} case${made === 1 ? "" : "s"} written, ${r.skipped.length} verified and skipped, in ${resolve(o.out)} ` +
        `(${r.seconds.toFixed(2)} s${made > 0 ? `, ${(r.seconds / made).toFixed(2)} s per written case` : ""}); ` +
        (range ? `see manifest-${range[0]}-${range[1]}.jsonl; when every part is done: isofold dataset-merge ${o.out}` : `see manifest.jsonl and ${caseDirName(0)}/case.json`),
    );
  });
  const merge = program
    .command("dataset-merge")
    .description("join the parts of one dataset batch made with --cases A:B (their manifest-A-B.jsonl in one folder) into manifest.jsonl, after checking for gaps, overlaps, other settings and damaged files")
    .argument("<folder>", "the --out folder the parts wrote to");
  merge.exitOverride((err) => process.exit(err.exitCode === 0 ? 0 : 2));
  merge.action(async (folder: string) => {
    const r = await withOutputDir(folder, () => mergeDatasetParts(resolve(folder)), "dataset-merge");
    console.log(`dataset-merge: ${r.parts.length} part${r.parts.length === 1 ? "" : "s"} (${r.parts.join(", ")}) hold all ${r.count} cases; wrote ${join(resolve(folder), "manifest.jsonl")}`);
  });
}

/** The receive-coil options shared by `dataset` and `simulate`. */
export function addCoilOptions(c: Command, what: string): Command {
  return c
    .option("--coils <n>", `receive coils: 1 = one uniform body coil; N ≥ 2 = N circular loops on a cylinder around the z axis${what}`, "1")
    .option("--coil-rows <n>", "rows of loops along z (the loops split equally between rows)", "1")
    .option("--array-radius <length>", 'distance of the loop centres from the z axis, with units, e.g. "20 cm"; default 1.15 × the object half-extent (plus perturbations) + 1 cm')
    .option("--loop-radius <length>", "loop radius with units; default min(π·array radius/loops per row, 0.8·array radius)")
    .option("--row-spacing <length>", "distance between rows along z with units; default 1.8 × loop radius");
}

/**
 * simulate --coils N: the engine runs the uniform coil and every loop in one
 * pass (dataset/simulate.ts); the run folder gets the uniform coil's
 * k-space and image as usual, plus coil-images.npy, sensitivities.npy,
 * coils.png (each coil's magnitude, side by side) and coil-rss.png (the
 * root-sum-of-squares, which shows the coil shading). Undefined for one coil.
 */
export function coilRunFor(phantomFile: string, o: CoilCliOptions & { workers?: number; quiet?: boolean; shard?: unknown; readout?: "auto" | "fast" | "direct"; tolerance?: number }): RunOptions["coilRun"] {
  const probe = { ...o };
  if (probe.coils === "1" && !probe.loopRadius && !probe.arrayRadius && !probe.rowSpacing && probe.coilRows === "1") return undefined;
  if (o.shard) throw new UserError("--coils runs every coil in one pass; it does not split into shards: drop --shard", undefined, "--coils");
  return async (sl) => {
    const { seq, cells, protocol } = sl;
    if (protocol.slices.count > 1) throw new UserError("--coils simulates one slice or one 3D slab; set slices.count to 1", undefined, "--coils");
    const phantom = loadPhantom(phantomFile, protocol.field, { readArray: readRealNpy });
    const array = planCoilArray(o, phantom, protocol, parseVary([]), [phantom]);
    if (array.elements === 0) throw new UserError("one coil is the uniform coil of a normal run; give --coils N with N ≥ 2", undefined, "--coils");
    // over the cell centres: where the isochromats sit (none made)
    const m = cellsEnclosureMargin(array, cells);
    if (m >= 0) throw new UserError(`the coil array does not enclose the object: isochromats lie ${(m * 100).toFixed(2)} cm beyond a loop; give a larger --array-radius`, undefined, "--array-radius");
    const progress = new Progress("simulating coils", "chunk", o.quiet);
    const { kspace, plan, readout } = await simulateCoilsPlanned(seq, { cells, get iso() { return sl.iso; } }, array, protocol.receiverFilter, nodeExecutor(o.workers ?? defaultWorkers()), (d, t) => progress.update(d, t), {
      chunkIsochromats: chunkIsochromatsFromEnv(), wasm: wasmFromEnv(), ...(o.readout ? { readout: o.readout } : {}), ...(o.tolerance !== undefined ? { tolerance: o.tolerance } : {}),
    });
    progress.done();
    const C = coilCount(array), img = seq.image, n = img.slice * img.phase * img.read;
    const all = toImageGrid(kspace.re, kspace.im, C + 1, seq.kspace, img, seq.grid);
    const coilRe = all.re.slice(n), coilIm = all.im.slice(n);
    const axes = logicalAxes(protocol);
    const dx = protocol.fov.read / protocol.matrix.read, dy = protocol.fov.phase / protocol.matrix.phase;
    const pc = pixelCentres(axes, img, dx, dy, protocol.slice.thickness, protocol.slice.position);
    const sens = new Float64Array(2 * C * n);
    sensitivitiesAt(array, pc.x, pc.y, pc.z, n, sens, n, 0);
    const shape = [C, img.slice, img.phase, img.read];
    const files = new Map<string, Uint8Array>();
    files.set("coil-images.npy", encodeNpy({ dtype: "complex64", shape, data: { re: coilRe, im: coilIm } }));
    const sr = new Float64Array(C * n), si = new Float64Array(C * n);
    for (let i = 0; i < C * n; i++) { sr[i] = sens[2 * i]!; si[i] = sens[2 * i + 1]!; }
    files.set("sensitivities.npy", encodeNpy({ dtype: "complex64", shape, data: { re: sr, im: si } }));
    // pictures of the central slice-encoding step: RSS, and the coils side by side (same window for all)
    const P = img.slice, pz = Math.floor(P / 2), plane = img.phase * img.read;
    const rss = new Float64Array(plane);
    for (let c = 0; c < C; c++) {
      for (let i = 0; i < plane; i++) rss[i]! += coilRe[c * n + pz * plane + i]! ** 2 + coilIm[c * n + pz * plane + i]! ** 2;
    }
    for (let i = 0; i < plane; i++) rss[i] = Math.sqrt(rss[i]!);
    // pictures in display orientation, as image.png (report/display.ts, the same geometry as the run's affine)
    const disp = displayTransform(axesFromAffine(voxelAffine(protocol, protocol.slice.thickness * 1e3, protocol.slice.position * 1e3)));
    const rssD = toDisplay(disp, rss, img.read, img.phase);
    files.set("coil-rss.png", encodeGrayPng(rssD.values, rssD.width, rssD.height).png);
    const tw = rssD.width, th = rssD.height;
    const cols = Math.ceil(Math.sqrt(C)), rowsN = Math.ceil(C / cols);
    const W = cols * tw, H = rowsN * th, mosaic = new Float64Array(W * H);
    const mag = new Float64Array(plane);
    for (let c = 0; c < C; c++) {
      for (let i = 0; i < plane; i++) mag[i] = Math.hypot(coilRe[c * n + pz * plane + i]!, coilIm[c * n + pz * plane + i]!);
      const tile = toDisplay(disp, mag, img.read, img.phase).values;
      const ox = (c % cols) * tw, oy = Math.floor(c / cols) * th;
      for (let y = 0; y < th; y++) mosaic.set(tile.subarray(y * tw, (y + 1) * tw), (oy + y) * W + ox);
    }
    files.set("coils.png", encodeGrayPng(mosaic, W, H).png);
    const rows = seq.kspace.slice * seq.kspace.phase, read = seq.kspace.read;
    const k0 = { coils: 1, rows, read, re: kspace.re.slice(0, rows * read), im: kspace.im.slice(0, rows * read) };
    const placement = loopPlacement(array);
    return {
      kspace: k0, plan, files, readout,
      report: {
        kind: "circular loops", count: C, loopsPerRow: array.elements, rows: array.rows,
        loopRadiusM: round(array.loopRadius), arrayRadiusM: round(array.arrayRadius), rowSpacingM: round(array.rowSpacing), zCentreM: round(array.zCentre),
        loops: placement.map((l, q) => ({ coil: q, centreM: l.centre.map((v) => round(v)), normal: l.normal.map((v) => round(v)) })),
        sensitivity: "S_c(r) = (Bx − i·By)(r)/κ, B = Biot–Savart field per unit current of loop c; κ makes sqrt(Σ_c |S_c|²) = 1 at the array centre",
        files: {
          "coil-images.npy": "complex64 [coil, slice, phase, read]: each coil's image on the image grid (sensitivity applied to every isochromat before the readout)",
          "sensitivities.npy": "complex64 [coil, slice, phase, read]: S_c at the pixel centres",
          "coil-rss.png": "root-sum-of-squares of the coil images (central slice-encoding step): the coil shading, in display orientation as image.png (see display)",
          "coils.png": `each coil's magnitude side by side, ${cols} per row, coil 0 top left, one window for all; each tile in display orientation as image.png (see display)`,
        },
        uniformCoil: "image.png, image.npy and kspace.npy are the uniform coil (S = 1), simulated in the same pass; its k-space can differ from a run without --coils in the last bits (isochromats summed in column blocks)",
      },
    };
  };
}
