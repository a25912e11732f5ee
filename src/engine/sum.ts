/**
 * The fixed summation order that makes k-space independent of scheduling:
 * chunk partials are added in chunk order within blocks of BLOCK_CHUNKS
 * chunks (each block sum starts from zero), and block sums are added in block
 * order into the total (starting from zero). A shard holds whole blocks and
 * stores their block sums, so a merge adds the very same numbers in the very
 * same order as a single run: bitwise identical k-space.
 */

/** Chunks per block. Fixed: part of the result's definition, like CHUNK_ISOCHROMATS. */
export const BLOCK_CHUNKS = 4;

/** Number of blocks for `chunks` chunks. */
export function blockCount(chunks: number): number {
  return Math.ceil(chunks / BLOCK_CHUNKS);
}

/** Blocks of shard i of n: [b0, b1), contiguous, deterministic; some may be empty when n > blocks. */
export function shardBlocks(blocks: number, i: number, n: number): [number, number] {
  return [Math.floor((i * blocks) / n), Math.floor(((i + 1) * blocks) / n)];
}

/** Chunks of blocks [b0, b1). */
export function blockChunks(chunks: number, b0: number, b1: number): [number, number] {
  return [Math.min(chunks, b0 * BLOCK_CHUNKS), Math.min(chunks, b1 * BLOCK_CHUNKS)];
}

/** acc[j] += x[j] (re and im). */
export function addInto(accRe: Float64Array, accIm: Float64Array, xRe: Float64Array, xIm: Float64Array): void {
  const n = accRe.length;
  for (let j = 0; j < n; j++) {
    accRe[j] = accRe[j]! + xRe[j]!;
    accIm[j] = accIm[j]! + xIm[j]!;
  }
}

/**
 * Accepts chunk partials in any order and adds them in the fixed order.
 * Chunks c0 … c1−1 must all arrive (c0 on a block boundary). Each completed
 * block sum is passed to onBlock(b, re, im), in block order; the arrays are
 * reused afterwards, so copy them if they must be kept.
 */
export class BlockSummer {
  private next: number;
  private readonly pending = new Map<number, { re: Float64Array; im: Float64Array }>();
  private readonly bRe: Float64Array;
  private readonly bIm: Float64Array;

  constructor(
    size: number,
    private readonly c0: number,
    private readonly c1: number,
    private readonly onBlock: (b: number, re: Float64Array, im: Float64Array) => void,
  ) {
    if (c0 % BLOCK_CHUNKS !== 0) throw new Error(`chunk range must start on a block boundary, got ${c0}`);
    this.next = c0;
    this.bRe = new Float64Array(size);
    this.bIm = new Float64Array(size);
  }

  /** Next chunk the order waits for. */
  get waitingFor(): number {
    return this.next;
  }

  /** Adds chunk c's partial (may be held until the chunks before it arrive). */
  add(c: number, re: Float64Array, im: Float64Array): void {
    this.pending.set(c, { re, im });
    for (;;) {
      const p = this.pending.get(this.next);
      if (!p) break;
      this.pending.delete(this.next);
      if (this.next % BLOCK_CHUNKS === 0) {
        this.bRe.fill(0);
        this.bIm.fill(0);
      }
      addInto(this.bRe, this.bIm, p.re, p.im);
      this.next++;
      if (this.next % BLOCK_CHUNKS === 0 || this.next === this.c1) {
        this.onBlock(Math.floor((this.next - 1) / BLOCK_CHUNKS), this.bRe, this.bIm);
      }
    }
  }

  get done(): boolean {
    return this.next === this.c1;
  }
}
