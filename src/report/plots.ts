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

/** Renders a vega-lite specification to an SVG string. Data must be inline (no URLs are loaded). */
export async function vegaLiteSvg(spec: Record<string, unknown>): Promise<string> {
  const [vega, vl] = await loadPlotLibraries();
  const compiled = vl.compile(spec as unknown as VegaLiteModule.TopLevelSpec).spec;
  // a loader that refuses every request: the report must not depend on the network or files
  const loader = vega.loader();
  loader.load = async (uri: string) => {
    throw new Error(`report plots load no data (asked for ${uri})`);
  };
  const view = new vega.View(vega.parse(compiled), { renderer: "none", loader });
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
