/**
 * `isofold check <phantom> --protocol <file>`: closed-form answers (src/check)
 * printed as a table or JSON; `--verify` also simulates and measures
 * (src/cli/verify.ts). No physics here.
 */
import type { Command } from "commander";
import { checkProtocol, DEFAULT_THRESHOLDS, parseRoi, parseThresholds, thresholdText, type CheckItem, type CheckResult } from "../check/index.js";
import { UserError } from "../errors.js";
import type { Protocol } from "../protocol/index.js";
import { loadPhantom, loadProtocol } from "./inputs.js";
import { buildSequence, type Sequence } from "../sequence/index.js";
import { collect } from "./options.js";
import { printWarnings, readRealNpy } from "./pipeline.js";
import { verifyCheck, type VerifyRow, type VerifyResult } from "./verify.js";
import { renderReportHtml, type ReportPage } from "../report/index.js";
import { existsSync, renameSync, statSync, writeFileSync } from "node:fs";
import { basename, dirname, resolve } from "node:path";

export interface CheckCliOptions {
  protocol: string;
  set: string[];
  roi?: string;
  json?: boolean;
  threshold: string[];
  reference?: string;
  verify?: boolean;
  html?: string;
}

/** An --html target must be a file in an existing folder; checked before any work (one line, exit 2). */
function checkHtmlTarget(file: string): string {
  const abs = resolve(file), dir = dirname(abs);
  if (!existsSync(dir) || !statSync(dir).isDirectory()) throw new UserError(`--html ${file}: the folder ${dir} does not exist; create it or name a file in an existing folder`);
  if (existsSync(abs) && statSync(abs).isDirectory()) throw new UserError(`--html ${file}: this is a folder; name a file, e.g. ${file.replace(/\/+$/, "")}/check.html`);
  return abs;
}

/** The check's warnings and --verify's, each once. */
function checkWarnings(result: CheckResult, verify: VerifyResult | null): string[] {
  return [...new Set([...result.warnings, ...(verify?.warnings ?? [])])];
}

/** The check as one self-contained page (same renderer as a run's report.html), written atomically. */
export function checkPage(result: CheckResult, phantomFile: string, verify: VerifyResult | null): ReportPage {
  const tables: ReportPage["tables"] = [];
  if (verify) {
    tables.push({
      id: "verify", title: `Predicted and measured (--verify, simulated in ${verify.seconds.toFixed(1)} s)`,
      rows: verify.rows.map((r) => ({ label: r.quantity, value: `predicted ${r.predicted}; measured ${r.measured}; difference ${r.difference}`, note: r.note })),
    });
  }
  if (result.notes.length) tables.push({ id: "notes", title: "Notes", rows: result.notes.map((n, i) => ({ label: `note ${i + 1}`, value: n })) });
  return {
    title: `isofold check: ${result.sequence} of ${basename(phantomFile)}`,
    subtitle: `Closed-form answers, no simulation${verify ? " (with --verify: a simulation measured the same quantities)" : ""}. Read ${result.axes.read}, phase ${result.axes.phase}, slice ${result.axes.slice}; ROI: ${result.roi}.`,
    safety: result.safety,
    checks: result.items.map((it) => ({ key: it.key, label: it.label, value: it.value, unit: it.unit, verdict: it.verdict, threshold: it.threshold.text, reason: it.reason })),
    comparisons: [], tables, images: [], plots: [], warnings: checkWarnings(result, verify), displayNote: "",
    footer: "Made by isofold check. Self-contained page: nothing is fetched.",
  };
}

function sequenceOf(p: Protocol, file: string): Sequence {
  try {
    return buildSequence(p);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(file);
    throw e;
  }
}

/** Loads the inputs and runs the check; every input problem is a UserError before any output. */
export function runCheck(phantomFile: string, o: CheckCliOptions): { result: CheckResult; protocol: Protocol; seq: Sequence } {
  const thresholds = parseThresholds(o.threshold ?? []);
  const roi = o.roi !== undefined ? parseRoi(o.roi) : null;
  const protocol = loadProtocol(o.protocol, o.set ?? []);
  const seq = sequenceOf(protocol, o.protocol);
  const refProtocol = o.reference ? loadProtocol(o.reference) : null;
  const reference = o.reference && refProtocol ? { name: o.reference, seq: sequenceOf(refProtocol, o.reference), field: refProtocol.field } : null;
  const phantom = loadPhantom(phantomFile, protocol.field, { readArray: readRealNpy });
  const result = checkProtocol(phantom, protocol, seq, { roi, roiText: o.roi, thresholds, reference });
  return { result, protocol, seq };
}

function fmt(v: number | null, unit: string): string {
  if (v === null || Number.isNaN(v)) return "—";
  const a = Math.abs(v);
  const t = a !== 0 && (a >= 1e4 || a < 1e-3) ? v.toExponential(2) : a >= 100 ? v.toFixed(0) : a >= 10 ? v.toFixed(1) : v.toFixed(2);
  return unit ? (unit === "%" ? `${t} %` : `${t} ${unit}`) : t;
}

function table(rows: string[][]): string {
  const w = rows[0]!.map((_, c) => Math.max(...rows.map((r) => (r[c] ?? "").length)));
  return rows.map((r) => r.map((x, c) => (c === r.length - 1 ? x : x.padEnd(w[c]!))).join("  ").trimEnd()).join("\n");
}

export function checkTable(items: CheckItem[]): string {
  const rows = [["check", "value", "verdict", "threshold", "reason"]];
  for (const it of items) rows.push([it.label, fmt(it.value, it.unit), it.verdict, it.threshold.text, it.reason]);
  return table(rows);
}

function verifyTable(rows: VerifyRow[]): string {
  const out = [["quantity", "predicted", "measured", "difference", "note"]];
  for (const r of rows) {
    out.push([r.quantity, r.predicted, r.measured, r.difference, r.note]);
  }
  return table(out);
}

/** The default thresholds, one line per key with its unit, for `check --help`. */
function thresholdHelp(): string {
  const keys = Object.keys(DEFAULT_THRESHOLDS);
  const w = Math.max(...keys.map((k) => k.length));
  const lines = Object.entries(DEFAULT_THRESHOLDS).map(([k, t]) => `  ${k.padEnd(w)}  ${thresholdText(t)}${t.unit ? "" : " (no unit)"}: ${t.meaning}`);
  return `\nDefault thresholds (key: verdict levels in the key's unit; --threshold key=watch,problem changes them):\n${lines.join("\n")}`;
}

export function registerCheck(program: Command): void {
  program
    .command("check")
    .description(
      "answer from closed forms, without simulating (under a second): fat shift, wrap, blur, distortion and cost, " +
        "each with a verdict (fine / watch / problem) against a stated threshold; --verify also simulates and compares",
    )
    .argument("<phantom>", "phantom file (JSON), e.g. phantoms/torso-slice.json")
    .requiredOption("-p, --protocol <file>", "protocol file (JSON) or bundled preset name")
    .option("-s, --set <key=value>", 'override a protocol value, repeatable, e.g. --set fov.phase="26 cm"', collect, [])
    .option("--roi <shape>", `region of interest: one shape in the phantom's syntax, e.g. '{"shape":"ellipse","center":["0 cm","0 cm"],"semiAxes":["5 cm","4 cm"]}' (default: the central half of the FOV)`)
    .option("--threshold <key=watch,problem>", "change a threshold, repeatable: key=watch,problem or key.watch=value, with the key's unit, e.g. fatShiftRead=0.5 px,1 px", collect, [])
    .option("--reference <file>", "protocol (file or preset) the relative SNR is stated against (default: the built-in reference of `isofold protocol`)")
    .option("--json", "print JSON instead of the table (item values in their unit; detail fields name theirs: px, mm, Hz; wrap positions and FOVs in m)")
    .option("--verify", "also simulate the protocol (in-process, small) and print predicted and measured values side by side")
    .option("--html <file>", "also write the answers as one self-contained page (works offline), e.g. --html out/check.html")
    .addHelpText("after", thresholdHelp())
    .action(async (phantomFile: string, o: CheckCliOptions) => {
      const htmlFile = o.html !== undefined ? checkHtmlTarget(o.html) : null;
      const { result } = runCheck(phantomFile, o);
      const verify = o.verify ? await verifyCheck(phantomFile, o, result) : null;
      const warnings = checkWarnings(result, verify);
      if (htmlFile) {
        const tmp = `${htmlFile}.${process.pid}.tmp`;
        writeFileSync(tmp, renderReportHtml(checkPage(result, phantomFile, verify)));
        renameSync(tmp, htmlFile);
      }
      if (o.json) {
        // JSON on stdout stays JSON: the warnings are in it and, as simulate prints them, on stderr
        printWarnings(warnings);
        process.stdout.write(JSON.stringify({ ...result, warnings, ...(verify ? { verify } : {}) }, null, 2) + "\n");
        return;
      }
      console.log(`${result.sequence}; read ${result.axes.read}, phase ${result.axes.phase}, slice ${result.axes.slice}; ROI: ${result.roi}`);
      console.log("");
      console.log(checkTable(result.items));
      // warnings on stdout with the answers they concern (on stderr too they would show twice)
      for (const w of warnings) console.log(`warning: ${w}`);
      for (const n of result.notes) console.log(`note: ${n}`);
      if (verify) {
        console.log("");
        console.log(`verify (simulated in ${verify.seconds.toFixed(1)} s):`);
        console.log(verifyTable(verify.rows));
      }
      console.log("");
      console.log(result.safety);
    });
}
