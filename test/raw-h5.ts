/**
 * raw.h5 (ISMRMRD) read back with h5wasm for the tests that check it against
 * the file contract: the XML header, the record head's member names in the
 * file's order, and each record as [head members, trajectory, interleaved
 * samples]. Call after `await h5wasm.ready`.
 */
import h5wasm, { type Dataset } from "h5wasm/node";

export function readRawH5(file: string): { xml: string; names: string[]; rows: [unknown[], Float32Array, Float32Array][] } {
  const f = new h5wasm.File(file, "r");
  try {
    const d = f.get("dataset/data") as Dataset;
    const names = (d.dtype as unknown as [string, [string, unknown][]][])[0]![1].map((m) => m[0]);
    const rows = d.value as unknown as [unknown[], Float32Array, Float32Array][];
    const xml = String((f.get("dataset/xml") as Dataset).value as unknown as string[]);
    return { xml, names, rows };
  } finally {
    f.close();
  }
}
