/**
 * NIfTI-1 single-file (.nii) writer, float32 volumes.
 *
 * Layout and fields follow the NIfTI-1 data format standard (header file
 * nifti1.h, NIfTI Data Format Working Group, 2004): a 348-byte little-endian
 * header, 4 extension bytes (all zero: no extensions), data from byte 352,
 * x fastest. Both orientations are written: the sform (sform_code 1, scanner)
 * holds the affine as given; the qform (qform_code 1) holds the same mapping
 * as a rotation quaternion, qfac, voxel sizes and offset.
 */

/** Options of {@link encodeNifti1}. */
export interface Nifti1Options {
  /** Voxel values, x fastest then y then z; length nx·ny·nz. */
  data: Float32Array;
  /** Voxel counts [nx, ny, nz]. */
  dims: [number, number, number];
  /** Voxel size [dx, dy, dz] in mm (positive); equal to the column lengths of the affine. */
  voxelMm: [number, number, number];
  /**
   * 3×4 matrix, rows [x, y, z], in mm: RAS+ scanner position of voxel index
   * (i, j, k) is affine · [i, j, k, 1]ᵀ.
   */
  affine: number[][];
  /** Free text, ASCII, at most 79 characters (longer is cut). */
  description?: string;
}

/** Size of the NIfTI-1 header in bytes. */
const HEADER_SIZE = 348;
/** First data byte: header plus the 4-byte extension flag. */
const VOX_OFFSET = 352;
const DT_FLOAT32 = 16;
const NIFTI_UNITS_MM = 2;
const NIFTI_UNITS_SEC = 8;
const NIFTI_XFORM_SCANNER_ANAT = 1;

/** qform parameters: quaternion (b, c, d) with a ≥ 0 implied, qfac = ±1. */
export interface QuaternionForm {
  b: number;
  c: number;
  d: number;
  qfac: 1 | -1;
}

type Row3 = [number, number, number];
type Mat3 = [Row3, Row3, Row3];
type Row4 = [number, number, number, number];
/** The checked affine: 3 rows of 4 finite numbers. */
type Affine = [Row4, Row4, Row4];
type I3 = 0 | 1 | 2;
const I3S = [0, 1, 2] as const;
const I4S = [0, 1, 2, 3] as const;

/** The 3×3 matrix of f(i, j), built row by row, each row left to right. */
function mat3(f: (i: I3, j: I3) => number): Mat3 {
  const row = (i: I3): Row3 => [f(i, 0), f(i, 1), f(i, 2)];
  return [row(0), row(1), row(2)];
}

/** Determinant, expanded along the first row. */
function det3(x: Mat3): number {
  const [[x00, x01, x02], [x10, x11, x12], [x20, x21, x22]] = x;
  return x00 * (x11 * x22 - x12 * x21) - x01 * (x10 * x22 - x12 * x20) + x02 * (x10 * x21 - x11 * x20);
}

/**
 * Nearest orthogonal matrix (polar factor) of a 3×3 matrix by the Newton
 * iteration X ← (X + X⁻ᵀ)/2 (N. J. Higham, "Computing the polar
 * decomposition—with applications", SIAM J. Sci. Stat. Comput. 7 (1986)
 * 1160–1174). Returns the input unchanged if it is already orthogonal.
 */
function polar(m: Mat3): Mat3 {
  let x = mat3((i, j) => m[i][j]);
  for (let iter = 0; iter < 50; iter++) {
    const det = det3(x);
    if (det === 0) throw new RangeError("NIfTI affine is singular");
    // inverse transpose = cofactor matrix / det
    const [[x00, x01, x02], [x10, x11, x12], [x20, x21, x22]] = x;
    const cof: Mat3 = [
      [x11 * x22 - x12 * x21, -(x10 * x22 - x12 * x20), x10 * x21 - x11 * x20],
      [-(x01 * x22 - x02 * x21), x00 * x22 - x02 * x20, -(x00 * x21 - x01 * x20)],
      [x01 * x12 - x02 * x11, -(x00 * x12 - x02 * x10), x00 * x11 - x01 * x10],
    ];
    let change = 0;
    const cur = x;
    const next = mat3((i, j) => {
      const v = 0.5 * (cur[i][j] + cof[i][j] / det);
      change = Math.max(change, Math.abs(v - cur[i][j]));
      return v;
    });
    x = next;
    if (change < 1e-15) break;
  }
  return x;
}

/**
 * Quaternion form of the rotation part of an affine (the standard NIfTI-1
 * qform method described in nifti1.h): normalise the columns of the 3×3 part,
 * orthogonalise, and if the determinant is negative set qfac = −1 and negate
 * the third column, leaving a proper rotation R; then (a, b, c, d) is the unit
 * quaternion of R with a ≥ 0 (K. Shoemake, "Animating rotation with
 * quaternion curves", SIGGRAPH 1985).
 * @throws RangeError when the affine has fewer than 3 rows of 3 numbers, or a column of zero length.
 */
export function quaternionFromAffine(affine: number[][]): QuaternionForm {
  const r = mat3((i, j) => {
    const v = affine[i]?.[j];
    if (v === undefined) throw new RangeError("NIfTI affine must have 3 rows of at least 3 numbers");
    return v;
  });
  for (const j of I3S) {
    const len = Math.hypot(r[0][j], r[1][j], r[2][j]);
    if (!(len > 0)) throw new RangeError(`NIfTI affine column ${j} has zero length`);
    for (const i of I3S) r[i][j] /= len;
  }
  const q = polar(r);
  const det = det3(q);
  let qfac: 1 | -1 = 1;
  if (det < 0) {
    qfac = -1;
    for (const i of I3S) q[i][2] = -q[i][2];
  }
  const [r11, r12, r13] = q[0];
  const [r21, r22, r23] = q[1];
  const [r31, r32, r33] = q[2];
  let a = r11 + r22 + r33 + 1;
  let b: number;
  let c: number;
  let d: number;
  if (a > 0.5) {
    a = 0.5 * Math.sqrt(a);
    b = (0.25 * (r32 - r23)) / a;
    c = (0.25 * (r13 - r31)) / a;
    d = (0.25 * (r21 - r12)) / a;
  } else {
    const xd = 1 + r11 - (r22 + r33);
    const yd = 1 + r22 - (r11 + r33);
    const zd = 1 + r33 - (r11 + r22);
    if (xd > 1) {
      b = 0.5 * Math.sqrt(xd);
      c = (0.25 * (r12 + r21)) / b;
      d = (0.25 * (r13 + r31)) / b;
      a = (0.25 * (r32 - r23)) / b;
    } else if (yd > 1) {
      c = 0.5 * Math.sqrt(yd);
      b = (0.25 * (r12 + r21)) / c;
      d = (0.25 * (r23 + r32)) / c;
      a = (0.25 * (r13 - r31)) / c;
    } else {
      d = 0.5 * Math.sqrt(zd);
      b = (0.25 * (r13 + r31)) / d;
      c = (0.25 * (r23 + r32)) / d;
      a = (0.25 * (r21 - r12)) / d;
    }
    if (a < 0) {
      b = -b;
      c = -c;
      d = -d;
    }
  }
  return { b, c, d, qfac };
}

/** Checks the options; returns the affine as 3 rows of 4 numbers. */
function checkInputs(opts: Nifti1Options): Affine {
  const { dims, voxelMm, affine, data } = opts;
  for (const n of dims) {
    if (!Number.isSafeInteger(n) || n < 1 || n > 32767) {
      throw new RangeError(`NIfTI-1 dimensions must be integers in 1..32767, got [${dims.join(", ")}]`);
    }
  }
  if (data.length !== dims[0] * dims[1] * dims[2]) {
    throw new RangeError(`NIfTI data has ${data.length} values, dims [${dims.join(", ")}] need ${dims[0] * dims[1] * dims[2]}`);
  }
  const row = (i: I3): Row4 => {
    const r = affine[i];
    if (affine.length !== 3 || r === undefined || r.length !== 4 || r.some((v) => !Number.isFinite(v))) {
      throw new RangeError("NIfTI affine must be 3 rows of 4 finite numbers (mm)");
    }
    return [r[0]!, r[1]!, r[2]!, r[3]!];
  };
  const a: Affine = [row(0), row(1), row(2)];
  for (const j of I3S) {
    const v = voxelMm[j];
    if (!(v > 0) || !Number.isFinite(v)) throw new RangeError(`voxel size ${j} must be positive mm, got ${v}`);
    const len = Math.hypot(a[0][j], a[1][j], a[2][j]);
    if (Math.abs(len - v) > 1e-5 * v) {
      throw new RangeError(`affine column ${j} has length ${len} mm but voxelMm[${j}] is ${v} mm`);
    }
  }
  return a;
}

/**
 * Encodes a float32 volume as a single-file NIfTI-1 image (.nii):
 * sizeof_hdr 348, datatype FLOAT32 (16), bitpix 32, dim = [3, nx, ny, nz, 1, 1, 1, 1],
 * pixdim = [qfac, dx, dy, dz, 0, 0, 0, 0] (mm), xyzt_units mm|s, vox_offset 352,
 * scl_slope 1, sform_code 1 with srow = affine, qform_code 1 from
 * {@link quaternionFromAffine}, magic "n+1\0". Voxel (i, j, k) is
 * data[i + nx·(j + ny·k)].
 * @throws RangeError on inconsistent sizes or an affine whose column lengths differ from voxelMm.
 */
export function encodeNifti1(opts: Nifti1Options): Uint8Array {
  const affine = checkInputs(opts);
  const { data, dims, voxelMm } = opts;
  const bytes = new Uint8Array(VOX_OFFSET + 4 * data.length);
  const v = new DataView(bytes.buffer);
  const le = true;
  v.setInt32(0, HEADER_SIZE, le);
  // dim[0..7] at 40
  const dim = [3, dims[0], dims[1], dims[2], 1, 1, 1, 1];
  dim.forEach((d, i) => v.setInt16(40 + 2 * i, d, le));
  v.setInt16(70, DT_FLOAT32, le); // datatype
  v.setInt16(72, 32, le); // bitpix
  const qf = quaternionFromAffine(affine);
  const pixdim = [qf.qfac, voxelMm[0], voxelMm[1], voxelMm[2], 0, 0, 0, 0];
  pixdim.forEach((d, i) => v.setFloat32(76 + 4 * i, d, le));
  v.setFloat32(108, VOX_OFFSET, le); // vox_offset
  v.setFloat32(112, 1, le); // scl_slope
  v.setFloat32(116, 0, le); // scl_inter
  bytes[123] = NIFTI_UNITS_MM | NIFTI_UNITS_SEC; // xyzt_units
  v.setFloat32(124, 0, le); // cal_max
  v.setFloat32(128, 0, le); // cal_min
  const text = (opts.description ?? "").slice(0, 79);
  for (let i = 0; i < text.length; i++) {
    const code = text.charCodeAt(i);
    bytes[148 + i] = code >= 0x20 && code < 0x7f ? code : 0x3f; // '?' for non-ASCII
  }
  v.setInt16(252, NIFTI_XFORM_SCANNER_ANAT, le); // qform_code
  v.setInt16(254, NIFTI_XFORM_SCANNER_ANAT, le); // sform_code
  v.setFloat32(256, qf.b, le);
  v.setFloat32(260, qf.c, le);
  v.setFloat32(264, qf.d, le);
  v.setFloat32(268, affine[0][3], le); // qoffset_x
  v.setFloat32(272, affine[1][3], le);
  v.setFloat32(276, affine[2][3], le);
  for (const row of I3S) {
    for (const col of I4S) v.setFloat32(280 + 16 * row + 4 * col, affine[row][col], le);
  }
  bytes.set([0x6e, 0x2b, 0x31, 0x00], 344); // "n+1\0"
  // bytes 348..351: extension flag, all zero.
  for (let i = 0, p = VOX_OFFSET; i < data.length; i++, p += 4) v.setFloat32(p, data[i]!, le);
  return bytes;
}
