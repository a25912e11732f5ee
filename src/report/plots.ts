/**
 * Plots as SVG: a vega-lite specification compiled to vega and rendered
 * headless by vega's own SVG renderer (`View.toSVG()`); no canvas, no network.
 */
import type * as VegaModule from "vega";
import type * as VegaLiteModule from "vega-lite";

// loaded on first use: the command line starts without them
let libs: Promise<[typeof VegaModule, typeof VegaLiteModule]> | null = null;

export interface Series {
  name: string;
  points: { x: number; y: number }[];
}

/** Starts loading vega and vega-lite (done once per thread; {@link vegaLiteSvg} awaits the same load). */
export function loadPlotLibraries(): Promise<[typeof VegaModule, typeof VegaLiteModule]> {
  libs ??= Promise.all([import("vega"), import("vega-lite")]);
  return libs;
}

/**
 * Runtime specifications (vega-lite compiled to vega, vega parsed) of recent plots, by their vega-lite
 * specification without its inline data values, with where those values sit in it: neither step reads the
 * values (they are ingested when the view runs), so a plot that differs from an earlier one only in its data
 * (a report's profiles run after run, a sweep's) skips both. Most recently made last; at most RUNTIME_CACHE.
 */
const runtimes = new Map<string, { spec: unknown; paths: (string | number)[][] }>();
const RUNTIME_CACHE = 8;
let runtimeHits = 0;

/** Plots served from the runtime cache so far on this thread (for tests). */
export function runtimeCacheHits(): number {
  return runtimeHits;
}

/** The places in `tree` that hold `target` itself (by reference). */
function pathsTo(tree: unknown, target: unknown, at: (string | number)[] = [], out: (string | number)[][] = []): (string | number)[][] {
  if (tree === target) out.push(at);
  else if (Array.isArray(tree)) tree.forEach((v, i) => pathsTo(v, target, [...at, i], out));
  else if (tree !== null && typeof tree === "object") for (const [k, v] of Object.entries(tree)) pathsTo(v, target, [...at, k], out);
  return out;
}

/** vega.parse(vl.compile(spec).spec), from {@link runtimes} where only the inline values differ (a new object either way). */
export function runtimeSpec(vega: typeof VegaModule, vl: typeof VegaLiteModule, spec: Record<string, unknown>): VegaModule.Runtime {
  const fresh = () => vega.parse(vl.compile(spec as unknown as VegaLiteModule.TopLevelSpec).spec);
  const data = spec["data"] as { values?: unknown } | undefined;
  const values = data?.values;
  if (!Array.isArray(values)) return fresh();
  const key = JSON.stringify({ ...spec, data: { ...data, values: null } });
  const hit = runtimes.get(key);
  if (hit) {
    runtimeHits++;
    const rt = structuredClone(hit.spec) as Record<string | number, unknown>;
    for (const path of hit.paths) {
      let o = rt;
      for (const k of path.slice(0, -1)) o = o[k] as Record<string | number, unknown>;
      o[path[path.length - 1]!] = values;
    }
    return rt as unknown as VegaModule.Runtime;
  }
  const rt = fresh();
  const paths = pathsTo(rt, values);
  // kept only where the values sit in whole arrays (not at the root) and the rest is plain data
  if (paths.length > 0 && paths.every((p) => p.length > 0)) {
    try {
      runtimes.set(key, { spec: structuredClone(rt), paths });
      if (runtimes.size > RUNTIME_CACHE) runtimes.delete(runtimes.keys().next().value!);
    } catch {
      /* not cloneable: made afresh every time */
    }
  }
  return rt;
}

/** Renders a vega-lite specification to an SVG string. Data must be inline (no URLs are loaded). */
export async function vegaLiteSvg(spec: Record<string, unknown>): Promise<string> {
  const [vega, vl] = await loadPlotLibraries();
  // a loader that refuses every request: the report must not depend on the network or files
  const loader = vega.loader();
  loader.load = async (uri: string) => {
    throw new Error(`report plots load no data (asked for ${uri})`);
  };
  const view = new vega.View(runtimeSpec(vega, vl, spec), { renderer: "none", loader });
  try {
    return await view.toSVG();
  } finally {
    view.finalize();
  }
}

/** Line plot of one or more series against a shared x axis. */
export function lineSpec(opts: { title: string; xTitle: string; yTitle: string; series: Series[]; width?: number; height?: number }): Record<string, unknown> {
  const values = opts.series.flatMap((s) => s.points.map((p) => ({ x: p.x, y: p.y, series: s.name })));
  return {
    $schema: "https://vega.github.io/schema/vega-lite/v6.json",
    title: opts.title,
    width: opts.width ?? 420,
    height: opts.height ?? 180,
    background: "white",
    data: { values },
    mark: { type: "line", point: opts.series.every((s) => s.points.length <= 16), strokeWidth: 1.5 },
    encoding: {
      x: { field: "x", type: "quantitative", title: opts.xTitle, scale: { zero: false } },
      y: { field: "y", type: "quantitative", title: opts.yTitle },
      color: { field: "series", type: "nominal", title: null, legend: opts.series.length > 1 ? { orient: "top" } : null },
    },
  };
}
