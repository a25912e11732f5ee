/**
 * ISMRMRD raw-data files (the ISMRM Raw Data format, an open standard:
 * S. J. Inati et al., "ISMRM Raw data format: A proposed standard for MRI raw
 * datasets", Magn. Reson. Med. 77 (2017) 411–421): an HDF5 file with a group
 * `dataset` holding `xml` (the header: one variable-length string, validated
 * by the standard's ismrmrd.xsd) and `data` (one compound record per readout:
 * `head` the acquisition header, `traj` and `data` variable-length float32
 * sequences; data = interleaved re, im, channel-major [channel][sample]).
 *
 * The acquisition header members, their types and the flag bit numbers are
 * those of the ISMRMRD 1.x C library (ismrmrd.h, from memory; the tests read
 * the files with that library's own tools, ismrmrd_info and
 * ismrmrd_recon_cartesian_2d). HDF5 compound members are matched by name, so
 * we store them packed.
 */
import { writeHdf5, memberOffsets, typeSize, type H5Type } from "./hdf5.js";

const u16: H5Type = { kind: "int", size: 2, signed: false };
const u32: H5Type = { kind: "int", size: 4, signed: false };
const u64: H5Type = { kind: "int", size: 8, signed: false };
const i32: H5Type = { kind: "int", size: 4, signed: true };
const f32: H5Type = { kind: "float", size: 4 };
const arr = (base: H5Type, n: number): H5Type => ({ kind: "array", base, dims: [n] });
/** Consecutive members of one type, in the order given. */
const same = (type: H5Type, ...names: string[]) => names.map((name) => ({ name, type }));

export const ENCODING_COUNTERS: H5Type = {
  kind: "compound",
  members: [
    ...same(u16, "kspace_encode_step_1", "kspace_encode_step_2", "average", "slice", "contrast", "phase", "repetition", "set", "segment"),
    { name: "user", type: arr(u16, 8) },
  ],
};

export const ACQUISITION_HEADER: H5Type & { kind: "compound" } = {
  kind: "compound",
  members: [
    { name: "version", type: u16 },
    { name: "flags", type: u64 },
    ...same(u32, "measurement_uid", "scan_counter", "acquisition_time_stamp"),
    { name: "physiology_time_stamp", type: arr(u32, 3) },
    ...same(u16, "number_of_samples", "available_channels", "active_channels"),
    { name: "channel_mask", type: arr(u64, 16) },
    ...same(u16, "discard_pre", "discard_post", "center_sample", "encoding_space_ref", "trajectory_dimensions"),
    { name: "sample_time_us", type: f32 },
    ...same(arr(f32, 3), "position", "read_dir", "phase_dir", "slice_dir", "patient_table_position"),
    { name: "idx", type: ENCODING_COUNTERS },
    { name: "user_int", type: arr(i32, 8) },
    { name: "user_float", type: arr(f32, 8) },
  ],
};

export const ACQUISITION: H5Type & { kind: "compound" } = {
  kind: "compound",
  members: [
    { name: "head", type: ACQUISITION_HEADER },
    { name: "traj", type: { kind: "vlen", base: f32 } },
    { name: "data", type: { kind: "vlen", base: f32 } },
  ],
};

/** Acquisition flag bit numbers (flag value = 2^(bit − 1)), ISMRMRD 1.x. */
export const ACQ_FLAG = {
  firstInEncodeStep1: 1, lastInEncodeStep1: 2, firstInEncodeStep2: 3, lastInEncodeStep2: 4,
  firstInAverage: 5, lastInAverage: 6, firstInSlice: 7, lastInSlice: 8,
  firstInRepetition: 13, lastInRepetition: 14,
  noiseMeasurement: 19, parallelCalibration: 20, parallelCalibrationAndImaging: 21, reverse: 22,
  lastInMeasurement: 25,
} as const;

export type AcqFlag = keyof typeof ACQ_FLAG;

export interface Acquisition {
  flags: AcqFlag[];
  scanCounter: number;
  samples: number;
  channels: number;
  centerSample: number;
  /** Dwell time (µs). */
  sampleTimeUs: number;
  /** Patient frame (LPS), mm; unit vectors. */
  position: [number, number, number];
  readDir: [number, number, number];
  phaseDir: [number, number, number];
  sliceDir: [number, number, number];
  idx: { kspaceEncodeStep1: number; kspaceEncodeStep2: number; average: number; slice: number; repetition: number };
  /** Samples [channel][sample], float64 here, stored as float32. */
  re: Float64Array;
  im: Float64Array;
}

/** Encodes the acquisitions as `data` records and the header as `xml`; returns the HDF5 file bytes. */
export function encodeIsmrmrd(xml: string, acqs: Acquisition[]): Uint8Array {
  const hoff = memberOffsets(ACQUISITION_HEADER);
  const ioff = memberOffsets(ENCODING_COUNTERS as H5Type & { kind: "compound" });
  const aoff = memberOffsets(ACQUISITION);
  const size = typeSize(ACQUISITION), trajAt = aoff.get("traj")!, dataAt = aoff.get("data")!;
  const data = new Uint8Array(acqs.length * size);
  const dv = new DataView(data.buffer);
  const vlen: { at: number; count: number; payload: Uint8Array }[] = [];
  acqs.forEach((a, i) => {
    const b = i * size, at = (name: string) => b + hoff.get(name)!;
    let flags = 0n;
    for (const f of a.flags) flags |= 1n << BigInt(ACQ_FLAG[f] - 1);
    dv.setUint16(at("version"), 1, true);
    dv.setBigUint64(at("flags"), flags, true);
    dv.setUint32(at("scan_counter"), a.scanCounter, true);
    dv.setUint16(at("number_of_samples"), a.samples, true);
    dv.setUint16(at("available_channels"), a.channels, true);
    dv.setUint16(at("active_channels"), a.channels, true);
    for (let c = 0; c < a.channels; c++) {
      const w = at("channel_mask") + 8 * Math.floor(c / 64);
      dv.setBigUint64(w, dv.getBigUint64(w, true) | (1n << BigInt(c % 64)), true);
    }
    dv.setUint16(at("center_sample"), a.centerSample, true);
    dv.setFloat32(at("sample_time_us"), a.sampleTimeUs, true);
    const vec = (name: string, v: number[]) => v.forEach((x, k) => dv.setFloat32(at(name) + 4 * k, x, true));
    vec("position", a.position);
    vec("read_dir", a.readDir);
    vec("phase_dir", a.phaseDir);
    vec("slice_dir", a.sliceDir);
    const ib = at("idx");
    dv.setUint16(ib + ioff.get("kspace_encode_step_1")!, a.idx.kspaceEncodeStep1, true);
    dv.setUint16(ib + ioff.get("kspace_encode_step_2")!, a.idx.kspaceEncodeStep2, true);
    dv.setUint16(ib + ioff.get("average")!, a.idx.average, true);
    dv.setUint16(ib + ioff.get("slice")!, a.idx.slice, true);
    dv.setUint16(ib + ioff.get("repetition")!, a.idx.repetition, true);
    const n = a.samples * a.channels;
    const f = new Float32Array(2 * n);
    for (let k = 0; k < n; k++) {
      f[2 * k] = a.re[k]!;
      f[2 * k + 1] = a.im[k]!;
    }
    vlen.push({ at: b + trajAt, count: 0, payload: new Uint8Array(0) });
    vlen.push({ at: b + dataAt, count: 2 * n, payload: new Uint8Array(f.buffer) });
  });
  const x = new TextEncoder().encode(xml);
  return writeHdf5({
    dataset: {
      data: { type: ACQUISITION, shape: [acqs.length], data, vlen },
      xml: { type: { kind: "vlenString" }, shape: [1], data: new Uint8Array(16), vlen: [{ at: 0, count: x.length, payload: x }] },
    },
  });
}

export interface IsmrmrdHeader {
  fieldT: number;
  h1Hz: number;
  channels: number;
  trajectory: "cartesian" | "epi";
  encoded: { x: number; y: number; z: number; fovMm: [number, number, number] };
  recon: { x: number; y: number; z: number; fovMm: [number, number, number] };
  /** Encoding limits: maximum and centre of kspace_encode_step_1/2 (minimum 0). */
  limits: { step1: [number, number]; step2: [number, number]; read: [number, number]; average?: [number, number] };
  trMs: number;
  teMs: number;
  flipDeg: number;
  echoTrainLength?: number;
  parallel?: { step1: number; step2: number; calibration?: "embedded" | "other" };
  comment: string;
}

const num = (v: number) => Number(v.toPrecision(7)).toString();

/**
 * The XML header (element order as ismrmrd.xsd requires). No <version>: the
 * C library compares it with its own schema version (8 for library 1.8) and
 * refuses others, while the element is optional in the schema.
 */
export function ismrmrdXml(h: IsmrmrdHeader): string {
  const space = (s: IsmrmrdHeader["encoded"]) =>
    `<matrixSize><x>${s.x}</x><y>${s.y}</y><z>${s.z}</z></matrixSize>` +
    `<fieldOfView_mm><x>${num(s.fovMm[0])}</x><y>${num(s.fovMm[1])}</y><z>${num(s.fovMm[2])}</z></fieldOfView_mm>`;
  const lim = (name: string, max: number, centre: number) => `<${name}><minimum>0</minimum><maximum>${max}</maximum><center>${centre}</center></${name}>`;
  const esc = (s: string) => s.replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;");
  return [
    `<?xml version="1.0" encoding="UTF-8"?>`,
    `<ismrmrdHeader xmlns="http://www.ismrm.org/ISMRMRD" xmlns:xs="http://www.w3.org/2001/XMLSchema">`,
    `<acquisitionSystemInformation><systemFieldStrength_T>${num(h.fieldT)}</systemFieldStrength_T><receiverChannels>${h.channels}</receiverChannels></acquisitionSystemInformation>`,
    `<experimentalConditions><H1resonanceFrequency_Hz>${Math.round(h.h1Hz)}</H1resonanceFrequency_Hz></experimentalConditions>`,
    `<encoding>`,
    `<encodedSpace>${space(h.encoded)}</encodedSpace>`,
    `<reconSpace>${space(h.recon)}</reconSpace>`,
    `<encodingLimits>${lim("kspace_encoding_step_0", h.limits.read[0], h.limits.read[1])}${lim("kspace_encoding_step_1", h.limits.step1[0], h.limits.step1[1])}` +
      `${lim("kspace_encoding_step_2", h.limits.step2[0], h.limits.step2[1])}${lim("average", h.limits.average?.[0] ?? 0, h.limits.average?.[1] ?? 0)}${lim("slice", 0, 0)}${lim("contrast", 0, 0)}` +
      `${lim("phase", 0, 0)}${lim("repetition", 0, 0)}${lim("set", 0, 0)}${lim("segment", 0, 0)}</encodingLimits>`,
    `<trajectory>${h.trajectory}</trajectory>`,
    h.parallel
      ? `<parallelImaging><accelerationFactor><kspace_encoding_step_1>${h.parallel.step1}</kspace_encoding_step_1><kspace_encoding_step_2>${h.parallel.step2}</kspace_encoding_step_2></accelerationFactor>` +
        `${h.parallel.calibration ? `<calibrationMode>${h.parallel.calibration}</calibrationMode>` : ""}</parallelImaging>`
      : "",
    h.echoTrainLength !== undefined ? `<echoTrainLength>${h.echoTrainLength}</echoTrainLength>` : "",
    `</encoding>`,
    `<sequenceParameters><TR>${num(h.trMs)}</TR><TE>${num(h.teMs)}</TE><flipAngle_deg>${num(h.flipDeg)}</flipAngle_deg></sequenceParameters>`,
    `<userParameters><userParameterString><name>isofold</name><value>${esc(h.comment)}</value></userParameterString></userParameters>`,
    `</ismrmrdHeader>`,
  ].filter((s) => s !== "").join("\n").replace(/[^\x00-\x7f]/gu, (c) => `&#${c.codePointAt(0)};`) + "\n"; // ASCII, as the string type says
}
