/**
 * Property-based fuzzing of the inputs (fast-check, fixed seeds): phantom
 * files, protocol files, --set values and flags, valid and invalid mixed —
 * wrong types, wrong or missing units, missing keys, extreme numbers, NaN and
 * Infinity spelled as strings, unicode, deep nesting, huge arrays, duplicate
 * keys. The rule checked: every input either runs (on a tiny grid) or ends in
 * a UserError — on the CLI one line on stderr, exit 2, nothing written. Any
 * other error, a stack trace, exit 1, a run past its time bound or a file
 * left behind is a failure. Each block prints how many inputs it tried.
 */
import { spawnSync } from "node:child_process";
import { existsSync, readdirSync, writeFileSync } from "node:fs";
import { join, resolve } from "node:path";
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { UserError } from "../src/errors.js";
import { loadPhantom, loadProtocol } from "../src/cli/inputs.js";
import { buildSequence } from "../src/sequence/index.js";
import { prepare, readRealNpy } from "../src/cli/pipeline.js";
import { simulateSerial } from "../src/engine/index.js";
import { defaultIsochromatOptions } from "../src/isochromats/index.js";
import { tempDir } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");

// ---- generators ----

const UNITS = ["ms", "s", "us", "cm", "mm", "m", "T", "mT", "deg", "rad", "Hz", "kHz", "Hz/px", "px", "mT/m", "T/m/s", "ppm", "gauss", "", "furlong", "ms/m"];
const numText = fc.oneof(
  fc.double({ noNaN: true, min: -1e6, max: 1e6 }).map(String),
  fc.constantFrom("0", "-0", "1", "0.5", "4", "8", "90", "180", "181", "360", "1e-30", "1e308", "1e309", "-1", "NaN", "Infinity", "-Infinity", "1/0", "0x10", "1e", ".", "", "½", "٣"),
);
/** Any value a key could be given: valid-looking quantities, bare numbers, other JSON types, odd strings. */
const anyValue: fc.Arbitrary<unknown> = fc.oneof(
  { weight: 5, arbitrary: fc.tuple(numText, fc.constantFrom(...UNITS)).map(([n, u]) => (u ? `${n} ${u}` : n)) },
  { weight: 2, arbitrary: fc.oneof(fc.integer({ min: -5, max: 4100 }), fc.double(), fc.constantFrom(0, 1, 4, 8, 1e308, -1e308, 2 ** 53)) },
  { weight: 1, arbitrary: fc.constantFrom(null, true, false, "NaN", "Infinity", "-Infinity", "NaN ms", "Infinity cm", "nan", "inf") },
  { weight: 1, arbitrary: fc.string({ unit: "grapheme", maxLength: 12 }) },
  { weight: 1, arbitrary: fc.constantFrom("gre", "se", "bssfp", "rare", "epi", "gre3d", "axial", "coronal", "sagittal", "x", "y", "z", "water", "fat", "sphere", "ellipse", "ideal", "rf", "none", "homodyne") },
  { weight: 1, arbitrary: fc.array(fc.constantFrom("1 cm", "0 cm", 1, "x"), { maxLength: 4 }) },
  { weight: 1, arbitrary: fc.jsonValue({ maxDepth: 3 }) },
);
/** Key paths of the protocol (valid ones and near misses). */
const PROTO_KEYS = [
  "sequence", "field", "fov.read", "fov.phase", "matrix.read", "matrix.phase", "matrix.slice", "matrix.partitions", "slice.thickness",
  "slice.position", "slice.orientation", "slice.angle", "slice.tiltAxis", "slices.count", "slices.gap", "slices.order", "phaseDirection",
  "bandwidth", "te", "tr", "flip", "refocusFlip", "oversampling.read", "oversampling.phase", "readoutPolarity", "partialFourier.phase",
  "partialFourier.read", "partialFourier.method", "receiverFilter", "hardware.gmax", "hardware.slew", "excitation.shape",
  "excitation.duration", "excitation.tbw", "excitation.steps", "refocusing.duration", "spoiling", "rfSpoilIncrement", "dummyScans",
  "phaseOrder", "averages", "ssfpPreparation", "echoTrainLength", "echoSpacing", "echoOrder", "shots", "epiEcho", "crusherCycles",
  "spoilerCycles", "shim", "extend", "fov", "matrix", "tee", "Fov.read", "__proto__.x", "constructor", "ünïcødé", "fov.read.x",
];
const keyPath = fc.oneof({ weight: 6, arbitrary: fc.constantFrom(...PROTO_KEYS) }, { weight: 1, arbitrary: fc.string({ unit: "grapheme", minLength: 1, maxLength: 10 }) });

/** Tiny valid protocols of every sequence kind (matrix 4–8). */
const BASES: Record<string, unknown>[] = [
  { sequence: "gre", field: "1.5 T", fov: { read: "8 cm" }, matrix: { read: 8, phase: 8 }, slice: { thickness: "5 mm" }, te: "5 ms", tr: "20 ms", flip: "30 deg", bandwidth: "500 Hz/px" },
  { sequence: "se", field: "3 T", fov: { read: "8 cm" }, matrix: { read: 4, phase: 4 }, slice: { thickness: "5 mm" }, te: "20 ms", tr: "100 ms", bandwidth: "500 Hz/px", excitation: { steps: 20 }, refocusing: { steps: 20 } },
  { sequence: "bssfp", field: "1.5 T", fov: { read: "8 cm" }, matrix: { read: 4, phase: 4 }, slice: { thickness: "5 mm" }, te: "2.5 ms", tr: "5 ms", flip: "40 deg", bandwidth: "1000 Hz/px", excitation: { duration: "1 ms", steps: 20 } },
  { sequence: "gre3d", field: "1.5 T", fov: { read: "8 cm" }, matrix: { read: 4, phase: 4, slice: 2 }, slice: { thickness: "10 mm" }, te: "5 ms", tr: "20 ms", flip: "20 deg", bandwidth: "500 Hz/px" },
  { sequence: "epi", field: "1.5 T", fov: { read: "8 cm" }, matrix: { read: 8, phase: 8 }, slice: { thickness: "5 mm" }, te: "20 ms", tr: "100 ms", bandwidth: "2000 Hz/px", excitation: { steps: 20 } },
  { sequence: "rare", field: "1.5 T", fov: { read: "8 cm" }, matrix: { read: 8, phase: 8 }, slice: { thickness: "5 mm" }, te: "30 ms", tr: "300 ms", echoTrainLength: 4, bandwidth: "500 Hz/px", excitation: { steps: 20 }, refocusing: { steps: 20 } },
];

const GEL = { pd: 1, t1: "800 ms", t2: "90 ms", t2star: "45 ms", species: "water" };
const BASE_PHANTOM = {
  name: "fuzz", tissues: { gel: GEL, oil: { pd: 0.9, t1: "250 ms", t2: "60 ms", t2star: "20 ms", species: "fat" } },
  shapes: [
    { shape: "ellipse", center: ["-1 cm", "0 cm"], semiAxes: ["1.5 cm", "1 cm"], tissue: "gel" },
    { shape: "sphere", center: ["1.5 cm", "0 cm", "0 cm"], radius: "1 cm", tissue: "oil" },
  ],
};
const PHANTOM_KEYS = [
  "name", "description", "tissues.gel.pd", "tissues.gel.t1", "tissues.gel.t2", "tissues.gel.t2star", "tissues.gel.species", "tissues.gel.fatFraction",
  "tissues.gel.fatModel", "tissues.oil", "tissues.new", "tissues", "shapes", "shapes.0.shape", "shapes.0.center", "shapes.0.semiAxes", "shapes.0.tissue",
  "shapes.0.rotation", "shapes.1.radius", "shapes.1.center", "shapes.1.shape", "shapes.1.label", "b0", "b0.expression", "b0.fieldMap",
  "b0.susceptibility", "b0.expression2", "ünï", "shapes.0.size",
];

function clone<T>(v: T): T {
  return JSON.parse(JSON.stringify(v)) as T;
}
/** Sets (or with `undefined`, deletes) a dotted key path; numeric parts index arrays. */
function setPath(obj: Record<string, unknown>, path: string, value: unknown): void {
  const parts = path.split(".");
  let cur: Record<string, unknown> = obj;
  for (const k of parts.slice(0, -1)) {
    // own properties only: "__proto__.x" must make an own key "__proto__", not write into Object.prototype
    const next = Object.hasOwn(cur, k) ? cur[k] : undefined;
    if (typeof next !== "object" || next === null) {
      Object.defineProperty(cur, k, { value: {}, enumerable: true, writable: true, configurable: true });
    }
    cur = cur[k] as Record<string, unknown>;
  }
  const last = parts[parts.length - 1]!;
  if (value === undefined) delete cur[last];
  else Object.defineProperty(cur, last, { value, enumerable: true, writable: true, configurable: true });
}

type Mutation = { path: string; value: unknown; del: boolean };
const mutation = (keys: fc.Arbitrary<string>): fc.Arbitrary<Mutation> =>
  fc.record({ path: keys, value: anyValue, del: fc.boolean() }).map((m) => ({ ...m, del: m.del && Math.random() < 2 })); // del as drawn

/** Special text-level damage: duplicate keys, deep nesting, huge arrays, BOM, truncation. */
const damage = fc.constantFrom("none", "none", "none", "dup", "deep", "huge", "bom", "cut", "trailing-comma", "many-shapes");

const HUGE = `[${Array(100000).fill('"1 cm"').join(",")}]`;
const DEEP = "[".repeat(5000) + "]".repeat(5000);

function render(obj: Record<string, unknown>, how: string): string {
  const text = JSON.stringify(obj, null, 1);
  switch (how) {
    case "dup": {
      const m = /"([^"\\]+)": ([^{[\n]+?),?\n/.exec(text);
      return m ? text.replace(m[0], `"${m[1]}": ${m[2]},\n"${m[1]}": ${m[2]},\n`) : text;
    }
    case "deep": return text.replace(/^\{/, `{"deep": ${DEEP},`);
    case "huge": return text.replace(/^\{/, `{"huge": ${HUGE},`);
    case "bom": return "\ufeff" + text;
    case "cut": return text.slice(0, Math.floor(text.length / 2));
    case "trailing-comma": return text.replace(/\n\}$/, ",\n}");
    case "many-shapes": {
      const o = clone(obj) as { shapes?: unknown };
      if (Array.isArray(o.shapes) && o.shapes.length) o.shapes = Array(1000).fill(o.shapes[0]);
      return JSON.stringify(o);
    }
    default: return text;
  }
}

const protocolCase = fc.record({
  base: fc.integer({ min: 0, max: BASES.length - 1 }),
  muts: fc.array(mutation(keyPath), { maxLength: 3 }),
  damage,
  sets: fc.array(fc.tuple(keyPath, anyValue, fc.boolean()), { maxLength: 2 }),
});
const phantomCase = fc.record({
  muts: fc.array(mutation(fc.constantFrom(...PHANTOM_KEYS)), { maxLength: 3 }),
  damage,
});

function protocolText(c: { base: number; muts: Mutation[]; damage: string }): string {
  const o = clone(BASES[c.base]!);
  for (const m of c.muts) setPath(o, m.path, m.del ? undefined : m.value);
  return render(o, c.damage);
}
function phantomText(c: { muts: Mutation[]; damage: string }): string {
  const o = clone(BASE_PHANTOM) as Record<string, unknown>;
  for (const m of c.muts) setPath(o, m.path, m.del ? undefined : m.value);
  return render(o, c.damage);
}
/** A --set argument: key=value with the value as JSON or as bare text. */
function setArg([k, v, raw]: [string, unknown, boolean]): string {
  return `${k}=${raw && typeof v === "string" ? v : JSON.stringify(v) ?? ""}`;
}

/** Runs f; a UserError (with a one-line message) counts as a clean refusal, anything else fails the property. */
function refusesCleanly(f: () => void): "ok" | "refused" {
  try {
    f();
    return "ok";
  } catch (e) {
    if (!(e instanceof UserError)) throw new Error(`not a user error: ${(e as Error).stack ?? String(e)}`);
    expect(e.message).not.toContain("\n");
    return "refused";
  }
}

// ---- in-process: parsers, sequence builder, engine on a tiny grid ----

describe("fuzz: parsers and the in-process pipeline", () => {
  it("protocol files with --set values: parse and build the sequence, or a UserError", () => {
    const dir = tempDir("isofold-fuzz-");
    const f = join(dir, "p.json");
    let tried = 0, ok = 0;
    const t0 = Date.now();
    fc.assert(
      fc.property(protocolCase, (c) => {
        tried++;
        writeFileSync(f, protocolText(c));
        const t = Date.now();
        const r = refusesCleanly(() => buildSequence(loadProtocol(f, c.sets.map(setArg))));
        if (r === "ok") ok++;
        expect(Date.now() - t).toBeLessThan(5000);
      }),
      { seed: 20240901, numRuns: 400 },
    );
    console.log(`fuzz protocol: ${tried} inputs tried, ${ok} valid, ${tried - ok} refused with one line, ${((Date.now() - t0) / 1000).toFixed(1)} s`);
    expect(ok).toBeGreaterThan(20);
    expect(tried - ok).toBeGreaterThan(100);
  });

  it("phantom files: load or a UserError", () => {
    const dir = tempDir("isofold-fuzz-");
    const f = join(dir, "ph.json");
    let tried = 0, ok = 0;
    const t0 = Date.now();
    fc.assert(
      fc.property(phantomCase, fc.constantFrom(1.5, 3, 0.55, 7), (c, field) => {
        tried++;
        writeFileSync(f, phantomText(c));
        const t = Date.now();
        if (refusesCleanly(() => loadPhantom(f, field, { readArray: readRealNpy })) === "ok") ok++;
        expect(Date.now() - t).toBeLessThan(5000);
      }),
      { seed: 77, numRuns: 300 },
    );
    console.log(`fuzz phantom: ${tried} inputs tried, ${ok} valid, ${tried - ok} refused with one line, ${((Date.now() - t0) / 1000).toFixed(1)} s`);
    expect(ok).toBeGreaterThan(20);
    expect(tried - ok).toBeGreaterThan(100);
  });

  it("protocol × phantom × isochromat options through prepare and the engine on a tiny grid", () => {
    const dir = tempDir("isofold-fuzz-");
    const pf = join(dir, "p.json"), phf = join(dir, "ph.json");
    let tried = 0, ran = 0, skipped = 0;
    const t0 = Date.now();
    fc.assert(
      fc.property(
        // at most one change per file, and half the files unchanged: most inputs get as far as the engine
        fc.tuple(protocolCase, fc.boolean()).map(([c, keep]) => ({ ...c, damage: "none", muts: keep ? [] : c.muts.slice(0, 1), sets: keep ? [] : c.sets.slice(0, 1) })),
        fc.tuple(phantomCase, fc.boolean()).map(([c, keep]) => ({ ...c, damage: c.damage === "many-shapes" ? c.damage : "none", muts: keep ? [] : c.muts.slice(0, 1) })),
        fc.record({ density: fc.integer({ min: 1, max: 2 }), sliceCount: fc.integer({ min: 1, max: 3 }), t2primeIsochromats: fc.constantFrom(1, 2), fatModel: fc.constantFrom("single" as const, "multi" as const) }),
        (pc, phc, iso) => {
          tried++;
          writeFileSync(pf, protocolText(pc));
          writeFileSync(phf, phantomText(phc));
          refusesCleanly(() => {
            const p = prepare({ phantom: phf, protocol: pf, sets: pc.sets.map(setArg), out: join(dir, "out"), seed: 1, iso: { ...defaultIsochromatOptions(), ...iso }, workers: 1 });
            // the engine's work grows with lines × TRs × isochromats: only tiny runs are played (the bound is the point of the test)
            const work = p.seq.blocks.length * p.iso.count;
            if (p.protocol.matrix.read > 8 || p.protocol.matrix.phase > 8 || work > 3e6) {
              skipped++;
              return;
            }
            const t = Date.now();
            const k = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter }).kspace;
            for (let i = 0; i < k.re.length; i++) if (!Number.isFinite(k.re[i]!) || !Number.isFinite(k.im[i]!)) throw new Error(`k-space sample ${i} is not finite`);
            expect(Date.now() - t).toBeLessThan(5000);
            ran++;
          });
        },
      ),
      { seed: 4242, numRuns: 100 },
    );
    console.log(`fuzz pipeline: ${tried} inputs tried, ${ran} simulated on a tiny grid, ${skipped} valid but larger than the tiny-grid bound, ${tried - ran - skipped} refused; ${((Date.now() - t0) / 1000).toFixed(1)} s`);
    expect(ran).toBeGreaterThan(10);
  });
});

// ---- the compiled CLI as a child process: exit codes, one-line stderr, nothing left behind ----

const flagValue = fc.oneof(fc.constantFrom("1", "2", "0", "-1", "17", "4097", "1.5", "abc", "", "NaN", "Infinity", "1e9", "٣"), fc.string({ maxLength: 4 }));
const flags = fc.array(
  fc.oneof(
    fc.tuple(fc.constantFrom("--density", "--slice-isochromats", "--t2prime-isochromats", "--seed", "--workers", "--slice-extent", "--fat-model", "--max-memory", "--shard"), flagValue),
    fc.constantFrom<[string, string?]>(["--truth"], ["--bogus"], ["-q"], ["--density", "1"], ["--fat-model", "single"], ["--shard", "0/2"]),
  ),
  { maxLength: 3 },
);

describe("fuzz: the compiled CLI", () => {
  it("a seeded sample of inputs and flags: exit 0 with the run folder, or exit 2 with one line and nothing written", () => {
    let tried = 0, ok = 0;
    const t0 = Date.now();
    fc.assert(
      // every other input keeps the files valid, so that runs as well as refusals are exercised
      fc.property(protocolCase, phantomCase, flags, fc.constantFrom("simulate", "dataset"), fc.boolean(), (pc0, phc0, fl, cmd, clean) => {
        const pc = clean ? { ...pc0, muts: [], damage: "none", sets: [] } : pc0;
        const phc = clean ? { muts: [], damage: "none" } : phc0;
        tried++;
        const dir = tempDir("isofold-fuzzcli-");
        writeFileSync(join(dir, "p.json"), protocolText(pc));
        writeFileSync(join(dir, "ph.json"), phantomText(phc));
        const out = join(dir, "out");
        const args = [cmd, join(dir, "ph.json"), "-p", join(dir, "p.json"), "-o", out, ...pc.sets.flatMap((s) => ["--set", setArg(s)]),
          "--density", "1", "--slice-isochromats", "2", "--t2prime-isochromats", "1", "--workers", "1", "-q", ...fl.flat().filter((x): x is string => x !== undefined)];
        const r = spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8", timeout: 30_000 });
        const entries = readdirSync(dir).sort();
        expect(r.signal, `timed out or killed: ${args.join(" ")}`).toBe(null);
        expect(r.stderr).not.toMatch(/\n\s+at /);
        if (r.status === 0) {
          ok++;
          expect(existsSync(out)).toBe(true);
          expect(entries).toEqual(["out", "p.json", "ph.json"]);
        } else {
          expect(r.status, `${args.join(" ")}\n${r.stderr}`).toBe(2);
          // the run's warnings (one "warning: " line each) may come before the error
          const lines = r.stderr.split("\n").filter((l) => l !== "" && !l.startsWith("warning: "));
          expect(lines, r.stderr).toHaveLength(1);
          expect(lines[0]).toMatch(/^isofold: error: /);
          expect(entries, `left behind after ${args.join(" ")}`).toEqual(["p.json", "ph.json"]);
        }
      }),
      { seed: 31337, numRuns: 8 },
    );
    console.log(`fuzz CLI: ${tried} inputs tried, ${ok} ran, ${tried - ok} refused with one line and exit 2; ${((Date.now() - t0) / 1000).toFixed(1)} s`);
    expect(tried).toBe(8);
    expect(ok).toBeGreaterThan(0);
    // 8 fresh CLI processes one after another: 13 s alone, 24 s beside another file; the budget is twice the default for a loaded host
  }, 120_000);
});
