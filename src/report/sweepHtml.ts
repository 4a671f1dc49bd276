import type { Axis, Scalar } from '../sweep/grid.js';
import type { CellResult } from '../sweep/cells.js';
import { ranked, type Aggregate } from '../sweep/sweep.js';
import { VERSION } from '../version.js';

/**
 * The sweep's page, static HTML with inline SVG (no script): a heat map of the worst-case
 * median clean cancellation for one or two varied keys, a Pareto view (worst-case cancellation
 * against worst-case healthy share) for more, and every combination ranked, each linking to the
 * figures of its cells.
 */

export interface SweepReportInput {
  readonly base: string;
  readonly recordings: readonly string[];
  readonly axes: readonly Axis[];
  readonly combinations: readonly Aggregate[];
  /** tapwarden's pick among them (sweep.ts bestOf). */
  readonly best: Aggregate | null;
  readonly cells: readonly CellResult[];
  readonly judgedAtDb: number;
}

const esc = (s: string) => s.replace(/[&<>"]/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;' })[c]!);
const fmt = (v: Scalar) => (v === null ? 'null' : String(v));
const db = (v: number | null) => (v === null ? 'n/a' : `${v.toFixed(1)} dB`);
const pct = (v: number | null) => (v === null ? 'n/a' : `${(100 * v).toFixed(1)} %`);
const label = (p: Record<string, Scalar>) =>
  Object.entries(p)
    .map(([k, v]) => `${k.replace(/^(filter|supervisor)\./, '')}=${fmt(v)}`)
    .join(' ');
const same = (a: Record<string, Scalar>, b: Record<string, Scalar>) => JSON.stringify(a) === JSON.stringify(b);

/** A colour for a cancellation in dB on a cool-to-warm scale between lo and hi. */
function shade(v: number | null, lo: number, hi: number): string {
  if (v === null) return '#ddd';
  const t = hi > lo ? Math.max(0, Math.min(1, (v - lo) / (hi - lo))) : 0.5;
  // From slate (poor) through sand to teal (good).
  const stops = [
    [94, 84, 120],
    [222, 196, 140],
    [38, 140, 128],
  ];
  const i = t < 0.5 ? 0 : 1;
  const u = t < 0.5 ? t * 2 : (t - 0.5) * 2;
  const c = stops[i]!.map((a, j) => Math.round(a + (stops[i + 1]![j]! - a) * u));
  return `rgb(${c.join(',')})`;
}

function links(cells: readonly CellResult[], p: Record<string, Scalar>): string {
  return cells
    .filter((c) => !c.baseline && same(c.parameters as Record<string, Scalar>, p))
    .map((c, i) => {
      if (c.error !== null) return `<span class="failed" title="${esc(c.error.message)}">${i + 1}!</span>`;
      // Several measurement channels: the figures are the worst one's; each channel's on hover.
      const per = c.channels?.map((x) => `ch${x.channel} ${db(x.figures.cleanCancellationMedianDb)} ${pct(x.figures.healthyShare)} ${x.figures.verdict}`).join('; ');
      const title = per === undefined ? c.recording : `${c.recording}: ${per}; worst ch${c.channel}`;
      return `<a href="cells/${c.key}/summary.json" title="${esc(title)}">${i + 1}${per === undefined ? '' : `<small>ch${c.channel}</small>`}</a>`;
    })
    .join(' ');
}

function heatMap(input: SweepReportInput, best: Aggregate | null): string {
  const [rowAxis, colAxis] = input.axes.length === 1 ? [{ key: '', values: [null] as Scalar[] }, input.axes[0]!] : [input.axes[0]!, input.axes[1]!];
  const all = input.combinations.map((c) => c.worst.cleanCancellationMedianDb).filter((v): v is number => v !== null);
  const lo = Math.min(...all);
  const hi = Math.max(...all);
  const find = (r: Scalar, c: Scalar) =>
    input.combinations.find((a) => (rowAxis.key === '' || a.parameters[rowAxis.key] === r) && a.parameters[colAxis.key] === c);
  const head = `<tr><th>${esc(rowAxis.key)} \\ ${esc(colAxis.key)}</th>${colAxis.values.map((v) => `<th>${esc(fmt(v))}</th>`).join('')}</tr>`;
  const rows = rowAxis.values.map((r) => {
    const tds = colAxis.values.map((c) => {
      const a = find(r, c);
      if (!a) return '<td></td>';
      const star = best && same(best.parameters, a.parameters) ? ' best' : '';
      return `<td class="hm${star} ${a.verdict}" style="background:${shade(a.worst.cleanCancellationMedianDb, lo, hi)}"><b>${db(a.worst.cleanCancellationMedianDb)}</b><br><small>p5 ${db(a.worst.cleanCancellationP5Db)} · ${pct(a.worst.healthyShare)} · ${a.verdict}</small><br><small>${links(input.cells, a.parameters)}</small></td>`;
    });
    return `<tr><th>${esc(fmt(r))}</th>${tds.join('')}</tr>`;
  });
  return `<h2>Worst-case median clean cancellation</h2>
<p class="note">Each square: the lowest median over the recordings (large), the lowest 5th percentile and healthy share (small), and links to each recording's figures. Outlined: tapwarden's pick.</p>
<table class="heat">${head}${rows.join('')}</table>`;
}

function pareto(input: SweepReportInput, best: Aggregate | null): string {
  const pts = input.combinations.filter((a) => a.worst.cleanCancellationMedianDb !== null && a.worst.healthyShare !== null);
  if (pts.length === 0) return '';
  const W = 720;
  const H = 420;
  const m = 50;
  const xs = pts.map((a) => a.worst.cleanCancellationMedianDb!);
  const x0 = Math.min(...xs);
  const x1 = Math.max(...xs) + 1e-9;
  const X = (v: number) => m + ((v - x0) / (x1 - x0 || 1)) * (W - 2 * m);
  const Y = (v: number) => H - m - v * (H - 2 * m);
  const front = pts.filter((a) => !pts.some((b) => b !== a && b.worst.cleanCancellationMedianDb! >= a.worst.cleanCancellationMedianDb! && b.worst.healthyShare! >= a.worst.healthyShare! && (b.worst.cleanCancellationMedianDb! > a.worst.cleanCancellationMedianDb! || b.worst.healthyShare! > a.worst.healthyShare!)));
  const dots = pts
    .map((a) => {
      const on = front.includes(a);
      const isBest = best !== null && same(best.parameters, a.parameters);
      return `<a href="#c-${esc(label(a.parameters).replace(/\W+/g, '_'))}"><circle cx="${X(a.worst.cleanCancellationMedianDb!).toFixed(1)}" cy="${Y(a.worst.healthyShare!).toFixed(1)}" r="${isBest ? 7 : 4.5}" class="${on ? 'front' : 'dot'}${isBest ? ' bestdot' : ''}"><title>${esc(label(a.parameters))}: ${db(a.worst.cleanCancellationMedianDb)}, ${pct(a.worst.healthyShare)}</title></circle></a>`;
    })
    .join('');
  const ticks = [0, 0.25, 0.5, 0.75, 1].map((v) => `<text x="${m - 6}" y="${Y(v) + 4}" text-anchor="end">${v * 100} %</text>`).join('');
  return `<h2>Cancellation against robustness</h2>
<p class="note">Each point a combination: worst-case median clean cancellation (across) against worst-case healthy share (up). Filled: the Pareto front (no other combination is better on both). Large: tapwarden's pick.</p>
<svg width="${W}" height="${H}" class="pareto" role="img" aria-label="Pareto view">
<line x1="${m}" y1="${H - m}" x2="${W - m}" y2="${H - m}" class="axis"/><line x1="${m}" y1="${m}" x2="${m}" y2="${H - m}" class="axis"/>
${ticks}<text x="${m}" y="${H - m + 20}">${db(x0)}</text><text x="${W - m}" y="${H - m + 20}" text-anchor="end">${db(x1)}</text>
<text x="${W / 2}" y="${H - 10}" text-anchor="middle">worst-case median clean cancellation</text>
${dots}
</svg>`;
}

export function renderSweepReport(input: SweepReportInput): string {
  const best = input.best;
  const rows = ranked(input.combinations)
    .map(
      (a) => `<tr id="c-${esc(label(a.parameters).replace(/\W+/g, '_'))}"${a === best ? ' class="bestrow"' : ''}><td>${esc(label(a.parameters))}</td><td class="${a.verdict}">${a.verdict}</td><td>${db(a.worst.cleanCancellationMedianDb)}</td><td>${db(a.worst.cleanCancellationP5Db)}</td><td>${pct(a.worst.healthyShare)}</td><td>${a.worst.worstBurstSeconds === null ? 'n/a' : `${a.worst.worstBurstSeconds.toFixed(1)} s`}</td><td>${a.worst.weightSaturations ?? 'n/a'}</td><td>${db(a.median.cleanCancellationMedianDb)}</td><td>${a.worseThanBaseline === null ? '' : a.worseThanBaseline.length === 0 ? 'not worse' : `<span class="worse" title="${esc(a.worseThanBaseline.join('\n'))}">worse</span>`}</td><td>${links(input.cells, a.parameters)}</td></tr>`,
    )
    .join('\n');
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>tapwarden sweep: ${esc(input.base)}</title>
<style>
body { font: 14px/1.45 "DejaVu Sans", system-ui, sans-serif; margin: 1.5em 2em; color: #1d2430; background: #fbfaf7; }
h1 { font-size: 1.3em; letter-spacing: 0.02em; } h2 { font-size: 1.05em; margin-top: 2em; text-transform: uppercase; letter-spacing: 0.08em; color: #4a5568; }
table { border-collapse: collapse; } td, th { padding: 0.3em 0.6em; text-align: right; border-bottom: 1px solid #e6e2d8; }
td:first-child, th:first-child { text-align: left; }
table.heat td { text-align: center; color: #10151d; min-width: 8em; border: 2px solid #fbfaf7; }
table.heat td.best { outline: 3px solid #10151d; outline-offset: -3px; }
.note { color: #6b6f76; font-size: 0.9em; max-width: 60em; } .failed, .worse, .poor { color: #a3322a; } .marginal { color: #9a6a12; } .ok { color: #1f6f5f; }
tr.bestrow td { background: #e6f0ec; font-weight: 600; }
svg.pareto { background: #fff; border: 1px solid #e6e2d8; } svg text { font-size: 11px; fill: #4a5568; }
.axis { stroke: #8a8f98; } .dot { fill: #b9b2c9; } .front { fill: #268c80; } .bestdot { stroke: #10151d; stroke-width: 2; }
</style>
</head>
<body>
<h1>tapwarden sweep over ${input.recordings.length} recording${input.recordings.length === 1 ? '' : 's'}</h1>
<p class="note">Base ${esc(input.base)}; ${input.combinations.length} combinations of ${input.axes.map((a) => `${esc(a.key)} (${a.values.length})`).join(' x ')}; every cell judged at ${input.judgedAtDb} dB (the base config's supervisor.minCancellationDb); tapwarden ${esc(VERSION)}.</p>
<p><b>Pick:</b> ${best === null ? 'none: every combination failed or is worse than the baseline' : `${esc(label(best.parameters))}: worst-case median ${db(best.worst.cleanCancellationMedianDb)}, 5th percentile ${db(best.worst.cleanCancellationP5Db)}, healthy ${pct(best.worst.healthyShare)}, ${best.verdict}`}</p>
${input.axes.length <= 2 ? heatMap(input, best) : pareto(input, best)}
<h2>All combinations</h2>
<p class="note">In the order of the pick's rule. Worst case over the recordings, then the median of their medians. Links: each recording's summary.json, in the order given (with several measurement channels, the worst channel's, its number beside the link and every channel's figures on hover).</p>
<table>
<tr><th>combination</th><th>verdict</th><th>median</th><th>p5</th><th>healthy</th><th>worst burst</th><th>w.sat</th><th>median of medians</th><th>gate</th><th>figures</th></tr>
${rows}
</table>
<p class="note">Recordings: ${input.recordings.map((r, i) => `${i + 1}. ${esc(r)}`).join('; ')}</p>
</body>
</html>
`;
}
