/** Plain-text tables for the terminal: left-aligned first column, right-aligned others. */
export function formatTable(header: readonly string[], rows: ReadonlyArray<readonly string[]>): string {
  const widths = header.map((h, c) => Math.max(h.length, ...rows.map((r) => (r[c] ?? '').length)));
  const line = (cells: readonly string[]): string =>
    cells
      .map((s, c) => (c === 0 ? s.padEnd(widths[c]!) : s.padStart(widths[c]!)))
      .join('  ')
      .trimEnd();
  return [line(header), line(widths.map((w) => '-'.repeat(w))), ...rows.map(line)].join('\n');
}

/** "mean ± half-width" with a fixed number of decimals; "n/a" when absent. */
export function pm(x: { mean: number; halfWidth: number } | null, digits = 3): string {
  if (!x) return 'n/a';
  const hw = Number.isFinite(x.halfWidth) ? x.halfWidth.toFixed(digits) : 'n/a';
  return `${x.mean.toFixed(digits)} ± ${hw}`;
}
