/**
 * CSV text for the run folder: header row, `\n` line ends, numbers with up to 8 significant
 * digits (so reruns are byte-identical and files stay readable), blank for not-a-number.
 */

export type Cell = string | number | undefined;

export function formatNumber(x: number | undefined): string {
  if (x === undefined || !Number.isFinite(x)) return x === Infinity ? 'Inf' : x === -Infinity ? '-Inf' : '';
  if (x === 0) return '0';
  return String(Number(x.toPrecision(8)));
}

function quote(text: string): string {
  return /[",\n\r]/.test(text) ? `"${text.replace(/"/g, '""')}"` : text;
}

export function formatCell(cell: Cell): string {
  return typeof cell === 'number' || cell === undefined ? formatNumber(cell) : quote(cell);
}

export function csvText(header: readonly string[], rows: readonly (readonly Cell[])[]): string {
  const lines = [header.map(quote).join(',')];
  for (const row of rows) lines.push(row.map(formatCell).join(','));
  return lines.join('\n') + '\n';
}
