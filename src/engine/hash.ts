/**
 * Numeric tuple index: maps fixed-width tuples of 32-bit words to dense ids
 * 0, 1, 2 … in first-seen order, by open addressing with linear probing.
 * Tuples compare by their bits, so float64 values (split into two words with
 * {@link f64Words}) are equal only when bitwise equal. No strings, no
 * per-entry objects: built for millions of isochromats.
 */

const F64 = new Float64Array(1);
const U32 = new Uint32Array(F64.buffer);

/** Writes the two 32-bit words of float64 `v` into out[o], out[o+1]; returns o + 2. */
export function f64Words(v: number, out: Uint32Array, o: number): number {
  F64[0] = v;
  out[o] = U32[0]!;
  out[o + 1] = U32[1]!;
  return o + 2;
}

export class TupleIndex {
  readonly width: number;
  /** Tuples by id, `width` words each. */
  keys: Uint32Array;
  /** Hash slots holding id + 1 (0 = empty). */
  private slots: Int32Array;
  private mask: number;
  size = 0;

  constructor(width: number, capacity = 1024) {
    this.width = width;
    let s = 16;
    while (s < 2 * capacity) s *= 2;
    this.slots = new Int32Array(s);
    this.mask = s - 1;
    this.keys = new Uint32Array(Math.max(1, capacity) * width);
  }

  /** Forgets every tuple (keeps the storage). */
  clear(): void {
    this.slots.fill(0);
    this.size = 0;
  }

  private hash(t: Uint32Array, o: number): number {
    let h = 0x811c9dc5 | 0;
    for (let k = 0; k < this.width; k++) {
      h = Math.imul(h ^ t[o + k]!, 0x9e3779b1);
      h ^= h >>> 15;
    }
    h = Math.imul(h ^ (h >>> 13), 0x85ebca6b);
    return (h ^ (h >>> 16)) & this.mask;
  }

  /** Id of the tuple t[o … o+width−1], adding it if it is new. */
  id(t: Uint32Array, o = 0): number {
    const w = this.width, keys = this.keys, slots = this.slots, mask = this.mask;
    let s = this.hash(t, o);
    for (;;) {
      const e = slots[s]!;
      if (e === 0) break;
      const b = (e - 1) * w;
      let same = true;
      for (let k = 0; k < w; k++) {
        if (keys[b + k] !== t[o + k]) {
          same = false;
          break;
        }
      }
      if (same) return e - 1;
      s = (s + 1) & mask;
    }
    const id = this.size++;
    if ((id + 1) * w > keys.length) {
      const nk = new Uint32Array(keys.length * 2);
      nk.set(keys);
      this.keys = nk;
    }
    this.keys.set(t.subarray(o, o + w), id * w);
    slots[s] = id + 1;
    if (2 * this.size > slots.length) this.grow();
    return id;
  }

  private grow(): void {
    const n = this.slots.length * 2;
    this.slots = new Int32Array(n);
    this.mask = n - 1;
    for (let id = 0; id < this.size; id++) {
      let s = this.hash(this.keys, id * this.width);
      while (this.slots[s] !== 0) s = (s + 1) & this.mask;
      this.slots[s] = id + 1;
    }
  }
}
