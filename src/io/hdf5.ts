/**
 * A small HDF5 file writer for what ISMRMRD needs: nested groups, datasets of
 * fixed-size numbers, arrays, compound types and variable-length members
 * (sequences and strings), stored contiguously, written in one go.
 *
 * Why our own: h5wasm (the HDF5 C library in WebAssembly) writes compound
 * datasets, but neither array members nor variable-length members inside a
 * compound, and the ISMRMRD acquisition record has both (its header has
 * fixed-size arrays, its trajectory and samples are variable-length float
 * sequences). h5wasm is used to read these files back in the tests.
 *
 * Format: "HDF5 File Format Specification Version 2.0" (The HDF Group),
 * using only the oldest structures every HDF5 library reads:
 *   superblock version 0 (sizes of offsets and lengths 8, group leaf K 4,
 *   internal K 16); old-style groups (symbol table message → version 1
 *   B-tree of group nodes + local heap; one symbol table node per group);
 *   version 1 object headers; datatype messages (fixed-point and
 *   floating-point version 1, compound and array version 2, variable-length
 *   version 1); dataspace version 1; fill value version 2; layout version 3
 *   (contiguous); variable-length data in global heap collections.
 * All numbers little-endian. No checksums exist in these structures.
 */

export type H5Type =
  | { kind: "int"; size: 1 | 2 | 4 | 8; signed: boolean }
  | { kind: "float"; size: 4 | 8 }
  | { kind: "array"; base: H5Type; dims: number[] }
  | { kind: "compound"; members: { name: string; type: H5Type }[] }
  | { kind: "vlen"; base: H5Type }
  /** Variable-length string, ASCII character set (as the ISMRMRD C library writes its header). */
  | { kind: "vlenString" };

/** Size in bytes of one element as stored in the file (variable-length: 4-byte length + heap address + index). */
export function typeSize(t: H5Type): number {
  switch (t.kind) {
    case "int": case "float": return t.size;
    case "array": return typeSize(t.base) * t.dims.reduce((a, b) => a * b, 1);
    case "compound": return t.members.reduce((s, m) => s + typeSize(m.type), 0);
    case "vlen": case "vlenString": return 16;
  }
}

/** Byte offset of each compound member (packed, in order). */
export function memberOffsets(t: Extract<H5Type, { kind: "compound" }>): Map<string, number> {
  const m = new Map<string, number>();
  let o = 0;
  for (const x of t.members) {
    m.set(x.name, o);
    o += typeSize(x.type);
  }
  return m;
}

const UNDEF = 0xffffffffffffffffn;

class Buf {
  bytes: Uint8Array;
  view: DataView;
  pos = 0;
  constructor(n: number) {
    this.bytes = new Uint8Array(n);
    this.view = new DataView(this.bytes.buffer);
  }
  u8(v: number) { this.view.setUint8(this.pos, v); this.pos += 1; }
  u16(v: number) { this.view.setUint16(this.pos, v, true); this.pos += 2; }
  u32(v: number) { this.view.setUint32(this.pos, v >>> 0, true); this.pos += 4; }
  u64(v: number | bigint) { this.view.setBigUint64(this.pos, BigInt(v), true); this.pos += 8; }
  raw(b: Uint8Array) { this.bytes.set(b, this.pos); this.pos += b.length; }
  pad8() { this.pos = align8(this.pos); }
}

function align8(n: number): number {
  return (n + 7) & ~7;
}

/** Encodes a datatype message body (class/version byte, bit field, size, properties). */
function encodeType(t: H5Type): Uint8Array {
  const parts: number[] = [];
  const u8 = (v: number) => parts.push(v & 0xff);
  const u16 = (v: number) => { u8(v); u8(v >> 8); };
  const u32 = (v: number) => { u16(v & 0xffff); u16(v >>> 16); };
  const head = (cls: number, version: number, bits: number, size: number) => {
    u8(cls | (version << 4));
    u8(bits); u8(bits >> 8); u8(bits >> 16);
    u32(size);
  };
  const add = (b: Uint8Array) => b.forEach((x) => parts.push(x));
  switch (t.kind) {
    case "int":
      head(0, 1, t.signed ? 0x08 : 0, t.size);
      u16(0); u16(8 * t.size);
      break;
    case "float":
      if (t.size === 4) {
        head(1, 1, 0x20 | (31 << 8), 4); // mantissa normalisation 2 (implied msb), sign at bit 31
        u16(0); u16(32); u8(23); u8(8); u8(0); u8(23); u32(127);
      } else {
        head(1, 1, 0x20 | (63 << 8), 8);
        u16(0); u16(64); u8(52); u8(11); u8(0); u8(52); u32(1023);
      }
      break;
    case "array": {
      head(10, 2, 0, typeSize(t));
      u8(t.dims.length); u8(0); u8(0); u8(0);
      for (const d of t.dims) u32(d);
      t.dims.forEach((_, i) => u32(i)); // permutation (unused by the library, must be the identity)
      add(encodeType(t.base));
      break;
    }
    case "compound": {
      head(6, 2, t.members.length, typeSize(t));
      const off = memberOffsets(t);
      for (const m of t.members) {
        const name = new TextEncoder().encode(m.name);
        const padded = align8(name.length + 1);
        add(name);
        for (let i = name.length; i < padded; i++) u8(0);
        u32(off.get(m.name)!);
        add(encodeType(m.type));
      }
      break;
    }
    case "vlen":
      head(9, 1, 0, 16);
      add(encodeType(t.base));
      break;
    case "vlenString":
      head(9, 1, 1, 16); // type 1 = string, null-terminated padding, ASCII
      add(encodeType({ kind: "int", size: 1, signed: false }));
      break;
  }
  return Uint8Array.from(parts);
}

/** A dataset: element bytes plus, for each variable-length slot, where it is and what it holds. */
export interface H5DatasetSpec {
  type: H5Type;
  shape: number[];
  /** typeSize(type) × product(shape) bytes; variable-length slots are filled in by the writer. */
  data: Uint8Array;
  /** Variable-length slots: byte offset in `data`, element count, payload bytes. */
  vlen?: { at: number; count: number; payload: Uint8Array }[];
}

export interface H5GroupSpec {
  [name: string]: H5GroupSpec | H5DatasetSpec;
}

function isDataset(x: H5GroupSpec | H5DatasetSpec): x is H5DatasetSpec {
  return (x as H5DatasetSpec).data instanceof Uint8Array && Array.isArray((x as H5DatasetSpec).shape);
}

const LEAF_K = 4, INTERNAL_K = 16;
const BTREE_SIZE = 24 + (2 * INTERNAL_K + 1) * 8 + 2 * INTERNAL_K * 8;
const SNOD_SIZE = 8 + 2 * LEAF_K * 40;
/** Largest global heap collection we fill (bytes of objects); the format allows larger, readers load a collection whole. */
const HEAP_COLLECTION = 1 << 20;

/** Writes a whole HDF5 file holding the given tree; returns its bytes. */
export function writeHdf5(root: H5GroupSpec): Uint8Array {
  // ---- plan: addresses of every structure ----
  interface GroupPlan { spec: H5GroupSpec; names: string[]; ohdr: number; btree: number; snod: number; heap: number; heapData: number; heapSize: number; offsets: number[] }
  interface DsetPlan { spec: H5DatasetSpec; ohdr: number; ohdrSize: number; typeBytes: Uint8Array; dataAddr: number }
  const groups: GroupPlan[] = [], dsets: DsetPlan[] = [];
  let pos = 96;
  const objAddr = new Map<object, number>();
  const planGroup = (spec: H5GroupSpec): GroupPlan => {
    const names = Object.keys(spec).sort();
    if (names.length > 2 * LEAF_K) throw new Error(`hdf5 writer: at most ${2 * LEAF_K} members per group`);
    const offsets: number[] = [];
    let hs = 8; // offset 0: the empty name
    for (const n of names) {
      offsets.push(hs);
      hs += align8(new TextEncoder().encode(n).length + 1);
    }
    const g: GroupPlan = { spec, names, ohdr: pos, btree: 0, snod: 0, heap: 0, heapData: 0, heapSize: hs, offsets };
    pos += 16 + 8 + 16;
    g.btree = pos; pos += BTREE_SIZE;
    g.snod = pos; pos += SNOD_SIZE;
    g.heap = pos; pos += 32;
    g.heapData = pos; pos += hs;
    groups.push(g);
    objAddr.set(spec, g.ohdr);
    for (const n of names) {
      const child = spec[n]!;
      if (isDataset(child)) {
        const typeBytes = encodeType(child.type);
        const ohdrSize = 16 + (8 + align8(8 + 8 * child.shape.length)) + (8 + align8(typeBytes.length)) + (8 + 8) + (8 + 24);
        const d: DsetPlan = { spec: child, ohdr: pos, ohdrSize, typeBytes, dataAddr: 0 };
        pos += ohdrSize;
        dsets.push(d);
        objAddr.set(child, d.ohdr);
      } else planGroup(child);
    }
    return g;
  };
  planGroup(root);
  // global heap collections for every variable-length payload, in dataset order
  interface Obj { payload: Uint8Array; collection: number; index: number }
  const objects: Obj[][] = dsets.map(() => []);
  const collections: { addr: number; size: number; objs: Obj[] }[] = [];
  let cur: { addr: number; size: number; objs: Obj[] } | null = null;
  dsets.forEach((d, di) => {
    for (const v of d.spec.vlen ?? []) {
      if (v.count === 0) { objects[di]!.push({ payload: v.payload, collection: -1, index: 0 }); continue; }
      const need = 16 + align8(v.payload.length);
      if (!cur || (cur.size + need > HEAP_COLLECTION && cur.objs.length > 0) || cur.objs.length >= 65535) {
        cur = { addr: 0, size: 16, objs: [] };
        collections.push(cur);
      }
      const o = { payload: v.payload, collection: collections.length - 1, index: cur.objs.length + 1 };
      cur.objs.push(o);
      cur.size += need;
      objects[di]!.push(o);
    }
  });
  for (const c of collections) {
    c.size = Math.max(4096, c.size);
    c.addr = pos;
    pos += c.size;
  }
  for (const d of dsets) {
    d.dataAddr = pos;
    pos += d.spec.data.length;
  }
  const out = new Buf(pos);
  // ---- superblock version 0 ----
  out.raw(Uint8Array.from([0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a]));
  out.u8(0); out.u8(0); out.u8(0); out.u8(0); out.u8(0); out.u8(8); out.u8(8); out.u8(0);
  out.u16(LEAF_K); out.u16(INTERNAL_K); out.u32(0);
  out.u64(0); out.u64(UNDEF); out.u64(pos); out.u64(UNDEF);
  const rootG = groups[0]!;
  symbolEntry(out, 0, rootG);
  // ---- groups ----
  function symbolEntry(b: Buf, nameOffset: number, target: GroupPlan | number): void {
    b.u64(nameOffset);
    if (typeof target === "number") {
      b.u64(target); b.u32(0); b.u32(0); b.u64(0); b.u64(0);
    } else {
      b.u64(target.ohdr); b.u32(1); b.u32(0); b.u64(target.btree); b.u64(target.heap);
    }
  }
  const groupOf = new Map<object, GroupPlan>(groups.map((g) => [g.spec, g]));
  for (const g of groups) {
    out.pos = g.ohdr;
    out.u8(1); out.u8(0); out.u16(1); out.u32(1); out.u32(8 + 16); out.u32(0);
    out.u16(0x11); out.u16(16); out.u8(0); out.u8(0); out.u8(0); out.u8(0);
    out.u64(g.btree); out.u64(g.heap);
    // B-tree (group node, leaf level 0) with one child: the symbol table node
    out.pos = g.btree;
    out.raw(new TextEncoder().encode("TREE"));
    out.u8(0); out.u8(0); out.u16(g.names.length > 0 ? 1 : 0); out.u64(UNDEF); out.u64(UNDEF);
    if (g.names.length > 0) {
      out.u64(0); out.u64(g.snod); out.u64(g.offsets[g.offsets.length - 1]!);
    }
    // symbol table node
    out.pos = g.snod;
    out.raw(new TextEncoder().encode("SNOD"));
    out.u8(1); out.u8(0); out.u16(g.names.length);
    g.names.forEach((n, i) => {
      const child = g.spec[n]!;
      symbolEntry(out, g.offsets[i]!, isDataset(child) ? objAddr.get(child)! : groupOf.get(child)!);
    });
    // local heap: names; free list empty (offset 1 ends the list, as the library writes it)
    out.pos = g.heap;
    out.raw(new TextEncoder().encode("HEAP"));
    out.u8(0); out.u8(0); out.u8(0); out.u8(0);
    out.u64(g.heapSize); out.u64(1); out.u64(g.heapData);
    g.names.forEach((n, i) => {
      out.pos = g.heapData + g.offsets[i]!;
      out.raw(new TextEncoder().encode(n));
    });
  }
  // ---- global heap collections ----
  for (const c of collections) {
    out.pos = c.addr;
    out.raw(new TextEncoder().encode("GCOL"));
    out.u8(1); out.u8(0); out.u8(0); out.u8(0); out.u64(c.size);
    for (const o of c.objs) {
      out.u16(o.index); out.u16(1); out.u32(0); out.u64(o.payload.length);
      out.raw(o.payload);
      out.pad8();
    }
    const free = c.addr + c.size - out.pos;
    if (free >= 16) {
      out.u16(0); out.u16(0); out.u32(0); out.u64(free);
    }
  }
  // ---- datasets ----
  dsets.forEach((d, di) => {
    const s = d.spec;
    out.pos = d.ohdr;
    out.u8(1); out.u8(0); out.u16(4); out.u32(1); out.u32(d.ohdrSize - 16); out.u32(0);
    // dataspace
    out.u16(0x01); out.u16(align8(8 + 8 * s.shape.length)); out.u8(0); out.u8(0); out.u8(0); out.u8(0);
    out.u8(1); out.u8(s.shape.length); out.u8(0); out.u8(0); out.u32(0);
    for (const n of s.shape) out.u64(n);
    out.pad8();
    // datatype (constant)
    out.u16(0x03); out.u16(align8(d.typeBytes.length)); out.u8(1); out.u8(0); out.u8(0); out.u8(0);
    out.raw(d.typeBytes);
    out.pad8();
    // fill value: version 2, allocation early, never written, no fill value defined
    out.u16(0x05); out.u16(8); out.u8(1); out.u8(0); out.u8(0); out.u8(0);
    out.u8(2); out.u8(1); out.u8(2); out.u8(0); out.u32(0);
    // layout: version 3, contiguous
    out.u16(0x08); out.u16(24); out.u8(0); out.u8(0); out.u8(0); out.u8(0);
    out.u8(3); out.u8(1); out.u64(d.dataAddr); out.u64(s.data.length); out.u8(0); out.u8(0); out.u8(0); out.u8(0); out.u8(0); out.u8(0);
    // raw data with the variable-length slots filled in
    out.bytes.set(s.data, d.dataAddr);
    (s.vlen ?? []).forEach((v, k) => {
      const o = objects[di]![k]!;
      out.pos = d.dataAddr + v.at;
      out.u32(v.count);
      out.u64(o.collection < 0 ? 0 : collections[o.collection]!.addr);
      out.u32(o.collection < 0 ? 0 : o.index);
    });
  });
  return out.bytes;
}
