/**
 * Built-in tissue library: T1, T2, T2* and relative proton density at 1.5 T
 * and 3 T, so phantom files can say `"tissue": "muscle"`.
 *
 * Status of each value:
 *   V  checked against a published copy of the cited source;
 *   M  recalled from memory, the cited paper not re-read; plausible, not exact;
 *   E  estimate by the stated rule, not a measurement;
 *   O  our own design value for a test material of our own (not a measurement).
 *
 * T2* rule (E). Published T2* is scarce and depends on voxel size and shim.
 * Where no value is cited, T2* = 1/(1/T2 + R2′) with the reversible rate
 * R2′ = 7 s⁻¹ at 1.5 T and 14 s⁻¹ at 3 T. The 1.5 T value comes from healthy
 * liver: R2* = 28.72 s⁻¹ (Obrzut et al. 2020, Sci Rep 10:17887, V) minus
 * R2 = 1/46 ms = 21.7 s⁻¹ (de Bazelaire 2004, 1.5 T, M) ≈ 7 s⁻¹; it is
 * doubled at 3 T because R2* grows roughly linearly with B0 (Peters et al.
 * 2007, MRI 25:748; linearity V). The simulator adds B0 spread on top.
 *
 * Proton densities are approximate water contents relative to pure water,
 * from memory (M); they are the same at both fields.
 *
 * Each entry carries the status and source of every value (`src`), so a
 * report can say which values were checked, recalled or estimated
 * (librarySources).
 */
import type { Tissue } from "./types.js";

const MS = 1e-3;

/** Reversible dephasing rates R2′ (s⁻¹) of the T2* rule above (E). */
const R2_PRIME = { 1.5: 7, 3: 14 } as const;

/** T2* (s) from T2 (s) by the rule in the header (E). */
function t2starRule(t2: number, field: 1.5 | 3): number {
  return 1 / (1 / t2 + R2_PRIME[field]);
}

interface Relax {
  /** s */ t1: number;
  /** s */ t2: number;
  /** s; computed by the rule when absent */ t2star?: number;
}

/** Status letter of a value (see the header) and the key of its source in SOURCES, if any. */
type Cite = `${"V" | "M" | "E" | "O"}${"" | `:${string}`}`;

interface RelaxSources {
  t1: Cite;
  t2: Cite;
  /** Absent: the T2* rule (E). */
  t2star?: Cite;
}

type LibraryEntry = {
  /** What the entry stands for. */
  about: string;
  /** Status and source of each value: pd, fat fraction (mixed tissues) and the relaxation times of each table. */
  src: { pd: Cite; fatFraction?: Cite; at1_5: RelaxSources; at3: RelaxSources };
  /** Relative proton density 0..1. */
  pd: number;
  at1_5: Relax;
  at3: Relax;
} & (
  | { species: "water" | "fat"; fatFraction?: undefined }
  /** Mixed tissue: fraction of the proton density that is fat, 0..1. */
  | { fatFraction: number; species?: undefined }
);

/**
 * The library. Sources:
 *   [dB]  de Bazelaire et al. 2004, Radiology 230:652–659 (in vivo): 3 T columns V, 1.5 T columns M.
 *   [St]  Stanisz et al. 2005, MRM 54:507–512 (in vitro, 37 °C): M.
 *   [Wa]  Wansapura et al. 1999, JMRI 9:531 (in vivo brain, 3 T): M.
 *   [Br]  brain T2 by GESSE at 1.5/3/7 T, Magn Reson Med 2010;64(5):1440–1445: V.
 *   [Pe]  Peters et al. 2007, MRI 25:748 (brain T2*): numbers M.
 *   [Ob]  Obrzut et al. 2020, Sci Rep 10:17887 (liver R2* at 1.5 T): V.
 *   [Li]  Li et al. 2017, MRM 77:2296 (in vivo arterial blood T1, 3 T): V.
 *   [Go]  Gold et al. 2004, AJR 183:343 (knee, 1.5 vs 3 T): M, low confidence.
 *   [Pa]  Pai, Li, Majumdar 2008, MRI 26:1215 (MSK at 3 T): V.
 * A value's status can differ from its paper's (e.g. [dB] at 1.5 T is M);
 * `src` of each entry gives the status of every value.
 */
const SOURCES: Record<string, string> = {
  dB: "de Bazelaire et al. 2004, Radiology 230:652–659",
  St: "Stanisz et al. 2005, Magn Reson Med 54:507–512",
  Wa: "Wansapura et al. 1999, J Magn Reson Imaging 9:531",
  Br: "brain T2 by GESSE at 1.5/3/7 T, Magn Reson Med 2010;64(5):1440–1445",
  Pe: "Peters et al. 2007, Magn Reson Imaging 25:748",
  Ob: "Obrzut et al. 2020, Sci Rep 10:17887",
  Li: "Li et al. 2017, Magn Reson Med 77:2296",
  Go: "Gold et al. 2004, AJR 183:343",
  Pa: "Pai, Li & Majumdar 2008, Magn Reson Imaging 26:1215",
};
const LIBRARY: Record<string, LibraryEntry> = {
  "water-gel": {
    about: "doped water gel of our own for test objects",
    src: { pd: "O", at1_5: { t1: "O", t2: "O", t2star: "O" }, at3: { t1: "O", t2: "O", t2star: "O" } },
    pd: 1.0, // O: essentially water
    species: "water",
    // O: design values chosen to resemble a paramagnetically doped gel
    // (relaxivity model 1/Ti = 1/Ti,0 + ri·C, Thangavel & Saritas 2017,
    // Turk J Elec Eng Comp Sci 25:2108); not measured.
    at1_5: { t1: 800 * MS, t2: 90 * MS, t2star: 60 * MS }, // O
    at3: { t1: 880 * MS, t2: 85 * MS, t2star: 45 * MS }, // O
  },
  oil: {
    about: "vegetable-type oil for test objects (fat spectrum)",
    src: { pd: "M", at1_5: { t1: "M", t2: "M", t2star: "O" }, at3: { t1: "M", t2: "M", t2star: "O" } },
    pd: 0.9, // M
    species: "fat",
    // M: typical of a vegetable oil at room temperature, from memory; design values.
    at1_5: { t1: 210 * MS, t2: 75 * MS, t2star: 45 * MS }, // M / O
    at3: { t1: 260 * MS, t2: 70 * MS, t2star: 30 * MS }, // M / O
  },
  fat: {
    about: "subcutaneous adipose tissue",
    src: { pd: "M", at1_5: { t1: "M:dB", t2: "M:dB" }, at3: { t1: "V:dB", t2: "V:dB" } },
    pd: 0.9, // M
    species: "fat",
    at1_5: { t1: 343 * MS, t2: 58 * MS }, // [dB] subcutaneous fat, M; T2* E
    at3: { t1: 382 * MS, t2: 68 * MS }, // [dB] V; T2* E
  },
  muscle: {
    about: "skeletal muscle (paravertebral)",
    src: { pd: "M", at1_5: { t1: "M:dB", t2: "M:dB" }, at3: { t1: "V:dB", t2: "V:dB" } },
    pd: 0.8, // M
    species: "water",
    at1_5: { t1: 856 * MS, t2: 27 * MS }, // [dB] paravertebral muscle, M; T2* E
    at3: { t1: 898 * MS, t2: 29 * MS }, // [dB] V; T2* E
  },
  liver: {
    about: "healthy liver",
    src: { pd: "M", at1_5: { t1: "M:dB", t2: "M:dB", t2star: "V:Ob" }, at3: { t1: "V:dB", t2: "V:dB" } },
    pd: 0.75, // M
    species: "water",
    at1_5: { t1: 586 * MS, t2: 46 * MS, t2star: 34.8 * MS }, // [dB] M; T2* [Ob] V (R2* 28.72 s⁻¹)
    at3: { t1: 809 * MS, t2: 34 * MS }, // [dB] V; T2* E
  },
  spleen: {
    about: "spleen",
    src: { pd: "M", at1_5: { t1: "M:dB", t2: "M:dB" }, at3: { t1: "V:dB", t2: "V:dB" } },
    pd: 0.8, // M
    species: "water",
    at1_5: { t1: 1057 * MS, t2: 79 * MS }, // [dB] M; T2* E
    at3: { t1: 1328 * MS, t2: 61 * MS }, // [dB] V; T2* E
  },
  kidney: {
    about: "kidney (cortex)",
    src: { pd: "M", at1_5: { t1: "M:dB", t2: "M:dB" }, at3: { t1: "V:dB", t2: "V:dB" } },
    pd: 0.85, // M
    species: "water",
    at1_5: { t1: 966 * MS, t2: 87 * MS }, // [dB] kidney cortex, M; T2* E
    at3: { t1: 1142 * MS, t2: 76 * MS }, // [dB] V; T2* E
  },
  "white-matter": {
    about: "cerebral white matter",
    src: { pd: "M", at1_5: { t1: "M:St", t2: "V:Br" }, at3: { t1: "M:St", t2: "V:Br" } },
    pd: 0.7, // M
    species: "water",
    at1_5: { t1: 884 * MS, t2: 80 * MS }, // T1 [St] M; T2 [Br] V; T2* E
    at3: { t1: 1084 * MS, t2: 71 * MS }, // T1 [St] M; T2 [Br] V; T2* E
  },
  "grey-matter": {
    about: "cortical grey matter",
    src: { pd: "M", at1_5: { t1: "M:St", t2: "V:Br", t2star: "M:Pe" }, at3: { t1: "M:Wa", t2: "V:Br", t2star: "M:Pe" } },
    pd: 0.82, // M
    species: "water",
    at1_5: { t1: 1124 * MS, t2: 87 * MS, t2star: 84 * MS }, // T1 [St] M; T2 [Br] frontal GM V; T2* [Pe] M
    // T1 in vivo [Wa] M (the in-vitro [St] 1820 ms is high for in vivo); T2 [Br] V; T2* [Pe] M
    at3: { t1: 1331 * MS, t2: 76 * MS, t2star: 66 * MS },
  },
  csf: {
    about: "cerebrospinal fluid",
    src: { pd: "M", at1_5: { t1: "M", t2: "M" }, at3: { t1: "M", t2: "M" } },
    pd: 1.0, // M
    species: "water",
    at1_5: { t1: 4300 * MS, t2: 2200 * MS }, // M (about 4.2–4.5 s and 2.1–2.3 s); T2* E
    at3: { t1: 4400 * MS, t2: 2000 * MS }, // M; T2* E
  },
  blood: {
    about: "arterial blood, static (flow is not modelled)",
    src: { pd: "M", at1_5: { t1: "M:St", t2: "M:St" }, at3: { t1: "V:Li", t2: "M:St" } },
    pd: 0.85, // M
    species: "water",
    at1_5: { t1: 1441 * MS, t2: 290 * MS }, // [St] human blood, M; T2* E
    at3: { t1: 1841 * MS, t2: 275 * MS }, // T1 [Li] adults V; T2 [St] M; T2* E
  },
  "bone-marrow": {
    about: "adult vertebral (lumbar) bone marrow, water and fat mixed",
    src: { pd: "M", fatFraction: "M", at1_5: { t1: "M:dB", t2: "M:dB" }, at3: { t1: "V:dB", t2: "V:dB" } },
    pd: 0.85, // M
    // M: adult lumbar marrow fat fraction is typically 30–50 %, from memory.
    // T1/T2 below are those measured on the mixture and apply to both parts.
    fatFraction: 0.4,
    at1_5: { t1: 549 * MS, t2: 49 * MS }, // [dB] bone marrow L4, M; T2* E
    at3: { t1: 586 * MS, t2: 49 * MS }, // [dB] V; T2* E
  },
  cartilage: {
    about: "hyaline (articular) cartilage",
    src: { pd: "M", at1_5: { t1: "M:Go", t2: "M:St" }, at3: { t1: "M:Go", t2: "V:Pa" } },
    pd: 0.7, // M
    species: "water",
    at1_5: { t1: 1024 * MS, t2: 30 * MS }, // T1 [Go]/[St] M; T2 [St] M low confidence; T2* E
    at3: { t1: 1240 * MS, t2: 36.4 * MS }, // T1 [Go] M low confidence; T2 [Pa] V; T2* E
  },
};

/** The fields (T) the library has tables for. */
export const LIBRARY_FIELDS = [1.5, 3] as const;

/**
 * Relative distance from a table field within which that table is used
 * without a warning: a system's true field differs from its nominal 1.5 T or
 * 3 T by a few percent.
 */
export const LIBRARY_FIELD_TOLERANCE = 0.05;

/** Names of the library tissues, in library order. */
export function libraryNames(): string[] {
  return Object.keys(LIBRARY);
}

/** True if `name` is a library tissue. */
export function isLibraryTissue(name: string): boolean {
  return Object.prototype.hasOwnProperty.call(LIBRARY, name);
}

/** One-line description of a library tissue, or undefined. */
export function libraryAbout(name: string): string | undefined {
  return isLibraryTissue(name) ? LIBRARY[name]!.about : undefined;
}

/** Plain-words status and source of one library value (see the header), e.g. "checked against …". */
function describeCite(c: Cite, rule?: string): string {
  const [status, key] = c.split(":") as [string, string | undefined];
  const ref = key ? SOURCES[key]! : undefined;
  switch (status) {
    case "V":
      return `checked against the published source: ${ref}`;
    case "M":
      return ref ? `recalled from memory, source not re-read: ${ref}` : "recalled from memory, no source cited";
    case "E":
      return `estimated by a rule, not measured${rule ? `: ${rule}` : ""}`;
    default:
      return "design value of our own for a test material, not measured";
  }
}

/** Status and source of each value of a library tissue (keys pd, t1, t2, t2star and, for mixed tissues, fatFraction). */
export type TissueSources = Record<string, string>;

/**
 * Where each value of library tissue `name` in table `table` (1.5 or 3 T)
 * comes from, in plain words; null for an unknown name.
 */
export function librarySources(name: string, table: 1.5 | 3): TissueSources | null {
  if (!isLibraryTissue(name)) return null;
  const e = LIBRARY[name]!;
  const r = table === 1.5 ? e.src.at1_5 : e.src.at3;
  const out: TissueSources = {
    pd: describeCite(e.src.pd),
    t1: describeCite(r.t1),
    t2: describeCite(r.t2),
    t2star: describeCite(r.t2star ?? "E", `T2* = 1/(1/T2 + R2′), R2′ = ${R2_PRIME[table]} s⁻¹ at ${table} T`),
  };
  if (e.src.fatFraction) out["fatFraction"] = describeCite(e.src.fatFraction);
  return out;
}

/** Result of a library look-up. */
export interface LibraryLookup {
  tissue: Tissue;
  /** The table field (T) the values come from: 1.5 or 3. */
  tableFieldT: number;
  /** Set when fieldT is not within LIBRARY_FIELD_TOLERANCE of the table used. */
  warning: string | null;
}

/**
 * Library tissue `name` at field `fieldT` (T). No interpolation: relaxation
 * does not scale linearly with field, so the values of the nearer table
 * (1.5 T or 3 T; ties go to 3 T) are returned unchanged. If fieldT is more
 * than 5 % away from that table, `warning` says so. Returns null for an
 * unknown name; throws RangeError if fieldT is not a positive finite number.
 * Times in the returned Tissue are in seconds.
 */
export function libraryTissue(name: string, fieldT: number): LibraryLookup | null {
  if (!(fieldT > 0) || !Number.isFinite(fieldT)) throw new RangeError(`field strength must be a positive number of tesla, got ${fieldT}`);
  if (!isLibraryTissue(name)) return null;
  const e = LIBRARY[name]!;
  const table: 1.5 | 3 = Math.abs(fieldT - 1.5) < Math.abs(fieldT - 3) ? 1.5 : 3;
  const r = table === 1.5 ? e.at1_5 : e.at3;
  const tissue: Tissue = {
    name,
    pd: e.pd,
    t1: r.t1,
    t2: r.t2,
    t2star: r.t2star ?? t2starRule(r.t2, table),
    fatFraction: e.fatFraction ?? (e.species === "fat" ? 1 : 0),
    source: librarySources(name, table)!,
  };
  const off = Math.abs(fieldT - table) / table;
  const warning =
    off > LIBRARY_FIELD_TOLERANCE
      ? `library tissue "${name}": values for ${table} T used at ${fieldT} T (the library has 1.5 T and 3 T tables only; no interpolation)`
      : null;
  return { tissue, tableFieldT: table, warning };
}
