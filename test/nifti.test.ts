import { describe, expect, it } from "vitest";
import * as nifti from "nifti-reader-js";
import { NIFTI1 } from "nifti-reader-js";
import { encodeNifti1, quaternionFromAffine } from "../src/io/nifti.js";

function toArrayBuffer(bytes: Uint8Array): ArrayBuffer {
  const ab = new ArrayBuffer(bytes.byteLength);
  new Uint8Array(ab).set(bytes);
  return ab;
}

/** Rotation about z by t radians. */
function rotZ(t: number): number[][] {
  return [
    [Math.cos(t), -Math.sin(t), 0],
    [Math.sin(t), Math.cos(t), 0],
    [0, 0, 1],
  ];
}
function rotX(t: number): number[][] {
  return [
    [1, 0, 0],
    [0, Math.cos(t), -Math.sin(t)],
    [0, Math.sin(t), Math.cos(t)],
  ];
}
/** Rotation by t radians about the axis u (Rodrigues' formula). */
function axisAngle(u: number[], t: number): number[][] {
  const l = Math.hypot(u[0]!, u[1]!, u[2]!);
  const x = u[0]! / l, y = u[1]! / l, z = u[2]! / l;
  const c = Math.cos(t);
  const s = Math.sin(t);
  const k = 1 - c;
  return [
    [c + x * x * k, x * y * k - z * s, x * z * k + y * s],
    [y * x * k + z * s, c + y * y * k, y * z * k - x * s],
    [z * x * k - y * s, z * y * k + x * s, c + z * z * k],
  ];
}
function mul(a: number[][], b: number[][]): number[][] {
  return a.map((row) => [0, 1, 2].map((j) => row[0]! * b[0]![j]! + row[1]! * b[1]![j]! + row[2]! * b[2]![j]!));
}
/** 3×4 affine with columns R[:, j]·vox[j] and offset t. */
function affineOf(r: number[][], vox: number[], t: number[]): number[][] {
  return [0, 1, 2].map((i) => [r[i]![0]! * vox[0]!, r[i]![1]! * vox[1]!, r[i]![2]! * vox[2]!, t[i]!]);
}

const dims: [number, number, number] = [4, 3, 2];
const voxelMm: [number, number, number] = [0.9375, 1.25, 5];
const data = Float32Array.from({ length: 24 }, (_, i) => i * 1.5 - 3);

const AFFINES: Array<[string, number[][], 1 | -1]> = [
  ["identity-axis (RAS)", affineOf([[1, 0, 0], [0, 1, 0], [0, 0, 1]], voxelMm, [-1.5, -1.25, -2.5]), 1],
  ["oblique rotation", affineOf(mul(rotZ(0.4), rotX(-0.7)), voxelMm, [10, -20, 30]), 1],
  ["x flipped (improper)", affineOf([[-1, 0, 0], [0, 1, 0], [0, 0, 1]], voxelMm, [120, -100, 0]), -1],
  ["coronal, improper", affineOf([[1, 0, 0], [0, 0, 1], [0, 1, 0]], voxelMm, [0, 5, -7]), -1],
  ["150° about −x (quaternion sign fixed)", affineOf(rotX((-150 * Math.PI) / 180), voxelMm, [4, 5, 6]), 1],
  ["160° about (1, −2, 3), improper", affineOf(mul(axisAngle([1, -2, 3], (160 * Math.PI) / 180), [[1, 0, 0], [0, -1, 0], [0, 0, 1]]), voxelMm, [-9, 8, 7]), -1],
  ["180° about z", affineOf(rotZ(Math.PI), voxelMm, [1, 2, 3]), 1],
  ["180° about x, z flipped", affineOf(mul(rotX(Math.PI), [[1, 0, 0], [0, 1, 0], [0, 0, -1]]), voxelMm, [0, 0, 0]), -1],
];

describe("encodeNifti1", () => {
  it("encodeNifti1 output is a NIfTI-1 single file read back with dims, mm voxel sizes, float32 type and the data", () => {
    const bytes = encodeNifti1({ data, dims, voxelMm, affine: AFFINES[0]![1]!, description: "isofold test" });
    const ab = toArrayBuffer(bytes);
    expect(nifti.isNIFTI1(ab)).toBe(true);
    expect(bytes.length).toBe(352 + 4 * 24);
    const h = nifti.readHeader(ab) as NIFTI1;
    expect(h.littleEndian).toBe(true);
    expect(h.magic).toBe("n+1");
    expect(h.dims.slice(0, 4)).toEqual([3, 4, 3, 2]);
    expect(h.datatypeCode).toBe(NIFTI1.TYPE_FLOAT32);
    expect(h.numBitsPerVoxel).toBe(32);
    expect(h.vox_offset).toBe(352);
    expect(h.pixDims.slice(1, 4)).toEqual(voxelMm);
    expect(h.xyzt_units & NIFTI1.SPATIAL_UNITS_MASK).toBe(NIFTI1.UNITS_MM);
    expect(h.xyzt_units & NIFTI1.TEMPORAL_UNITS_MASK).toBe(NIFTI1.UNITS_SEC);
    expect(h.sform_code).toBe(NIFTI1.XFORM_SCANNER_ANAT);
    expect(h.qform_code).toBe(NIFTI1.XFORM_SCANNER_ANAT);
    expect(h.cal_min).toBe(0);
    expect(h.cal_max).toBe(0);
    expect(h.description).toBe("isofold test");
    const img = new Float32Array(nifti.readImage(h, ab));
    expect(Array.from(img)).toEqual(Array.from(data));
  });

  for (const [name, affine, qfac] of AFFINES) {
    it(`encodeNifti1 writes the ${name} affine as sform and an equal qform with qfac ${qfac}`, () => {
      const ab = toArrayBuffer(encodeNifti1({ data, dims, voxelMm, affine }));
      const h = nifti.readHeader(ab) as NIFTI1;
      // The reader fills `affine` from the sform when sform_code > 0.
      for (let i = 0; i < 3; i++) {
        for (let j = 0; j < 4; j++) expect(h.affine[i]![j]!).toBeCloseTo(affine[i]![j]!, 5);
      }
      expect(h.pixDims[0]).toBe(qfac);
      const q = h.getQformMat();
      for (let i = 0; i < 3; i++) {
        for (let j = 0; j < 4; j++) expect(q[i]![j]!).toBeCloseTo(affine[i]![j]!, 5);
      }
      expect(h.quatern_b ** 2 + h.quatern_c ** 2 + h.quatern_d ** 2).toBeLessThanOrEqual(1 + 1e-6);
    });
  }

  it("quaternionFromAffine of a 90° rotation about z is (b, c, d) = (0, 0, sin 45°)", () => {
    const q = quaternionFromAffine(affineOf(rotZ(Math.PI / 2), [2, 2, 2], [0, 0, 0]));
    expect(q.qfac).toBe(1);
    expect(q.b).toBeCloseTo(0, 12);
    expect(q.c).toBeCloseTo(0, 12);
    expect(q.d).toBeCloseTo(Math.SQRT1_2, 12);
  });

  it("encodeNifti1 stores the voxel (i, j, k) at data[i + nx·(j + ny·k)] with x fastest", () => {
    const ab = toArrayBuffer(encodeNifti1({ data, dims, voxelMm, affine: AFFINES[0]![1]! }));
    const img = new Float32Array(nifti.readImage(nifti.readHeader(ab), ab));
    // voxel (i, j, k) = (3, 2, 1) → 3 + 4·(2 + 3·1) = 23
    expect(img[23]).toBe(data[3 + 4 * (2 + 3 * 1)]);
    expect(img[1]).toBe(data[1]);
  });

  it("encodeNifti1 cuts the description to 79 characters and ends it with a NUL", () => {
    const bytes = encodeNifti1({ data, dims, voxelMm, affine: AFFINES[0]![1]!, description: "x".repeat(100) });
    const h = nifti.readHeader(toArrayBuffer(bytes)) as NIFTI1;
    expect(h.description).toBe("x".repeat(79));
    expect(bytes[148 + 79]).toBe(0);
  });

  it("encodeNifti1 throws RangeError for a data length that does not match dims", () => {
    expect(() => encodeNifti1({ data: new Float32Array(5), dims, voxelMm, affine: AFFINES[0]![1]! })).toThrow(RangeError);
  });

  it("encodeNifti1 throws RangeError when affine column lengths differ from voxelMm", () => {
    const affine = affineOf([[1, 0, 0], [0, 1, 0], [0, 0, 1]], [1, 1, 1], [0, 0, 0]);
    expect(() => encodeNifti1({ data, dims, voxelMm, affine })).toThrow(/column 0/);
  });
});
