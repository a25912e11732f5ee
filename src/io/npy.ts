/**
 * NumPy `.npy` files (format described in NumPy Enhancement Proposal NEP 1,
 * "A simple file format for NumPy arrays"): a magic string, a version, a
 * little-endian header length, an ASCII Python-literal dict
 * {'descr', 'fortran_order', 'shape'}, then the raw data in C order.
 *
 * Complex arrays are passed in and out as separate re/im Float64Arrays; on
 * disk they are interleaved (re, im) pairs.
 */
import { UserError } from "../errors.js";

/** Element types isofold writes. */
export type NpyDtype = "complex64" | "complex128" | "float32" | "float64" | "uint8" | "int32";
/** Element types isofold reads (the same as it writes). */
export type NpyReadDtype = NpyDtype;

/** Separate real and imaginary parts of a complex array, same length. */
export interface ComplexData {
  re: Float64Array;
  im: Float64Array;
}

/** An array to write: complex64 takes {re, im}; the real types any numeric array-like. */
export type NpyInput =
  | { dtype: "complex64" | "complex128"; shape: number[]; data: ComplexData }
  | { dtype: "float32" | "float64" | "uint8" | "int32"; shape: number[]; data: ArrayLike<number> };

/** An array read from a file (C order). */
export type NpyArray =
  | { dtype: "complex64" | "complex128"; shape: number[]; data: ComplexData }
  | { dtype: "float32"; shape: number[]; data: Float32Array }
  | { dtype: "float64"; shape: number[]; data: Float64Array }
  | { dtype: "uint8"; shape: number[]; data: Uint8Array }
  | { dtype: "int32"; shape: number[]; data: Int32Array };

const MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]; // \x93NUMPY

const DESCR: Record<NpyDtype, string> = {
  complex64: "<c8",
  complex128: "<c16",
  float32: "<f4",
  float64: "<f8",
  uint8: "|u1",
  int32: "<i4",
};

const ITEM_SIZE: Record<NpyReadDtype, number> = {
  complex64: 8,
  complex128: 16,
  float32: 4,
  float64: 8,
  uint8: 1,
  int32: 4,
};

function shapeSize(shape: readonly number[]): number {
  let n = 1;
  for (const d of shape) {
    if (!Number.isSafeInteger(d) || d < 0) throw new RangeError(`invalid npy shape [${shape.join(", ")}]`);
    n *= d;
  }
  return n;
}

/** Python tuple literal of a shape: (), (3,), (2, 3). */
function shapeLiteral(shape: readonly number[]): string {
  if (shape.length === 0) return "()";
  if (shape.length === 1) return `(${shape[0]},)`;
  return `(${shape.join(", ")})`;
}

/**
 * Encodes an array as a version 1.0 `.npy` file: magic "\x93NUMPY", version
 * 1.0, uint16 LE header length, header dict padded with spaces and ended by
 * "\n" so that the preamble (magic + version + length + header) is a multiple
 * of 64 bytes, then the data little-endian in C order. descr is '<c8', '<c16', '<f4',
 * '<f8', '|u1' or '<i4'. complex64 interleaves re/im rounded to float32.
 * Version 2.0 (uint32 header length) is used only if the header exceeds 65535 bytes.
 * @throws RangeError if the data length differs from the product of the shape.
 */
export function encodeNpy(arr: NpyInput): Uint8Array {
  const count = shapeSize(arr.shape);
  if (arr.dtype === "complex64" || arr.dtype === "complex128") {
    if (arr.data.re.length !== count || arr.data.im.length !== count) {
      throw new RangeError(
        `${arr.dtype} npy of shape [${arr.shape.join(", ")}] needs ${count} values, got re ${arr.data.re.length}, im ${arr.data.im.length}`,
      );
    }
  } else if ((arr.data as ArrayLike<number>).length !== count) {
    throw new RangeError(`${arr.dtype} npy of shape [${arr.shape.join(", ")}] needs ${count} values, got ${(arr.data as ArrayLike<number>).length}`);
  }
  const dict = `{'descr': '${DESCR[arr.dtype]}', 'fortran_order': False, 'shape': ${shapeLiteral(arr.shape)}, }`;
  let version = 1;
  let fixed = 10; // magic 6 + version 2 + uint16 length 2
  let headerLen = Math.ceil((fixed + dict.length + 1) / 64) * 64 - fixed;
  if (headerLen > 0xffff) {
    version = 2;
    fixed = 12;
    headerLen = Math.ceil((fixed + dict.length + 1) / 64) * 64 - fixed;
  }
  const dataOffset = fixed + headerLen;
  const bytes = new Uint8Array(dataOffset + count * ITEM_SIZE[arr.dtype]);
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  bytes.set(MAGIC, 0);
  bytes[6] = version;
  bytes[7] = 0;
  if (version === 1) view.setUint16(8, headerLen, true);
  else view.setUint32(8, headerLen, true);
  for (let i = 0; i < dict.length; i++) bytes[fixed + i] = dict.charCodeAt(i);
  bytes.fill(0x20, fixed + dict.length, dataOffset - 1);
  bytes[dataOffset - 1] = 0x0a;

  let p = dataOffset;
  switch (arr.dtype) {
    case "complex64": {
      const { re, im } = arr.data;
      for (let i = 0; i < count; i++, p += 8) {
        view.setFloat32(p, re[i]!, true);
        view.setFloat32(p + 4, im[i]!, true);
      }
      break;
    }
    case "complex128": {
      const { re, im } = arr.data;
      for (let i = 0; i < count; i++, p += 16) {
        view.setFloat64(p, re[i]!, true);
        view.setFloat64(p + 8, im[i]!, true);
      }
      break;
    }
    case "float32":
      for (let i = 0; i < count; i++, p += 4) view.setFloat32(p, arr.data[i]!, true);
      break;
    case "float64":
      for (let i = 0; i < count; i++, p += 8) view.setFloat64(p, arr.data[i]!, true);
      break;
    case "uint8":
      for (let i = 0; i < count; i++, p += 1) view.setUint8(p, arr.data[i]!);
      break;
    case "int32":
      for (let i = 0; i < count; i++, p += 4) view.setInt32(p, arr.data[i]!, true);
      break;
  }
  return bytes;
}

function parseDescr(descr: string): NpyReadDtype | undefined {
  switch (descr) {
    case "<c8":
      return "complex64";
    case "<c16":
      return "complex128";
    case "<f4":
      return "float32";
    case "<f8":
      return "float64";
    case "|u1":
    case "<u1":
    case "u1":
      return "uint8";
    case "<i4":
      return "int32";
    default:
      return undefined;
  }
}

/**
 * Decodes a `.npy` file of version 1.0, 2.0 (or 3.0) in C order with descr
 * '<c8', '<c16', '<f4', '<f8', '|u1' or '<i4'. Complex data come back as
 * separate re/im Float64Arrays.
 * @param bytes the whole file.
 * @param source file name used in error messages.
 * @throws UserError naming `source` if the file is not such an array.
 */
export function decodeNpy(bytes: Uint8Array, source = "npy data"): NpyArray {
  const fail = (msg: string): never => {
    throw new UserError(msg, source);
  };
  if (bytes.length < 10 || MAGIC.some((b, i) => bytes[i] !== b)) {
    fail('not a NumPy .npy file (missing the "\\x93NUMPY" magic)');
  }
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const major = bytes[6];
  let fixed: number;
  let headerLen: number;
  if (major === 1) {
    fixed = 10;
    headerLen = view.getUint16(8, true);
  } else if (major === 2 || major === 3) {
    if (bytes.length < 12) fail("truncated .npy header");
    fixed = 12;
    headerLen = view.getUint32(8, true);
  } else {
    return fail(`unsupported .npy version ${major}.${bytes[7]}; allowed: 1.0, 2.0, 3.0`);
  }
  const dataOffset = fixed + headerLen;
  if (dataOffset > bytes.length) fail("truncated .npy header");
  const header = new TextDecoder(major === 3 ? "utf-8" : "latin1").decode(bytes.subarray(fixed, dataOffset));

  const descrMatch = /'descr'\s*:\s*'([^']*)'/.exec(header);
  const fortranMatch = /'fortran_order'\s*:\s*(True|False)/.exec(header);
  const shapeMatch = /'shape'\s*:\s*\(([^)]*)\)/.exec(header);
  if (!descrMatch || !fortranMatch || !shapeMatch) {
    return fail(`malformed .npy header ${JSON.stringify(header.trim())}`);
  }
  const descr = descrMatch[1]!;
  const dtype = parseDescr(descr);
  if (dtype === undefined) {
    return fail(`unsupported .npy dtype '${descr}'; allowed: '<c8', '<c16', '<f4', '<f8', '|u1', '<i4'`);
  }
  if (fortranMatch[1] === "True") fail("Fortran-order .npy arrays are not supported; save in C order");
  const shape: number[] = [];
  for (const part of shapeMatch[1]!.split(",")) {
    const t = part.trim();
    if (t === "") continue;
    const d = Number(t.replace(/L$/, ""));
    if (!Number.isSafeInteger(d) || d < 0) fail(`invalid .npy shape (${shapeMatch[1]})`);
    shape.push(d);
  }
  const count = shapeSize(shape);
  const need = count * ITEM_SIZE[dtype];
  if (bytes.length - dataOffset < need) {
    fail(`.npy data truncated: shape (${shape.join(", ")}) of ${descr} needs ${need} bytes, found ${bytes.length - dataOffset}`);
  }

  let p = dataOffset;
  switch (dtype) {
    case "complex64":
    case "complex128": {
      const re = new Float64Array(count);
      const im = new Float64Array(count);
      if (dtype === "complex64") {
        for (let i = 0; i < count; i++, p += 8) {
          re[i] = view.getFloat32(p, true);
          im[i] = view.getFloat32(p + 4, true);
        }
      } else {
        for (let i = 0; i < count; i++, p += 16) {
          re[i] = view.getFloat64(p, true);
          im[i] = view.getFloat64(p + 8, true);
        }
      }
      return { dtype, shape, data: { re, im } };
    }
    case "float32": {
      const data = new Float32Array(count);
      for (let i = 0; i < count; i++, p += 4) data[i] = view.getFloat32(p, true);
      return { dtype, shape, data };
    }
    case "float64": {
      const data = new Float64Array(count);
      for (let i = 0; i < count; i++, p += 8) data[i] = view.getFloat64(p, true);
      return { dtype, shape, data };
    }
    case "uint8":
      return { dtype, shape, data: bytes.slice(p, p + count) };
    case "int32": {
      const data = new Int32Array(count);
      for (let i = 0; i < count; i++, p += 4) data[i] = view.getInt32(p, true);
      return { dtype, shape, data };
    }
  }
}
