/**
 * Rendering: Vega-Lite specifications are compiled to Vega in Node (vega-lite's `compile`);
 * the SVG figure files are drawn by Vega's View API (`toSVG`, no browser or canvas needed);
 * the HTML page embeds the compiled Vega specifications and Vega's own browser bundle, which
 * draws them as SVG when the page opens, offline.
 */
import { readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { dirname, join } from 'node:path';
import { parse as parseVega, View, version as vegaVersion, type Spec as VegaSpec } from 'vega';
import { compile, version as vegaLiteVersion, type TopLevelSpec } from 'vega-lite';
import type { Figure } from './figures';

export { vegaVersion, vegaLiteVersion };

/** Look shared by every figure. */
const CONFIG = {
  font: 'Helvetica, Arial, sans-serif',
  view: { stroke: '#ddd' },
  axis: { labelFontSize: 11, titleFontSize: 12, grid: true, gridColor: '#eee' },
  legend: { labelFontSize: 11, titleFontSize: 12, labelLimit: 320 },
  header: { labelFontSize: 12, labelLimit: 320 },
  title: { fontSize: 14 },
};

/**
 * Compile a figure's Vega-Lite specification to Vega. A spec vega-lite rejects throws naming
 * the figure; its warnings are returned (the command prints them, the tests require none).
 */
export function toVega(f: Figure): { spec: VegaSpec; warnings: string[] } {
  const spec = { $schema: 'https://vega.github.io/schema/vega-lite/v6.json', config: CONFIG, ...f.spec } as unknown as TopLevelSpec;
  const warnings: string[] = [];
  const logger = {
    level: () => logger,
    error: (...a: unknown[]) => {
      throw new Error(`figure ${f.id}: vega-lite: ${a.join(' ')}`);
    },
    warn: (...a: unknown[]) => {
      warnings.push(a.join(' '));
      return logger;
    },
    info: () => logger,
    debug: () => logger,
  };
  const out = compile(spec, { logger: logger as never }).spec as VegaSpec;
  return { spec: out, warnings: warnings.map((w) => `figure ${f.id}: ${w}`) };
}

/** Draw a compiled figure as a standalone SVG document (Vega's headless renderer). */
export async function toSvg(spec: VegaSpec): Promise<string> {
  const view = new View(parseVega(spec), { renderer: 'none', logLevel: 0 });
  try {
    return await view.toSVG();
  } finally {
    view.finalize();
  }
}

/** Vega's browser bundle (UMD, defines `vega`), embedded in the page. */
export function vegaBrowserBundle(): string {
  const require = createRequire(import.meta.url);
  const main = require.resolve('vega'); // .../vega/build/vega.module.js
  const text = readFileSync(join(dirname(main), 'vega.min.js'), 'utf8');
  if (/<\/script/i.test(text)) throw new Error('vega.min.js contains "</script": it cannot be inlined as is');
  return text;
}
