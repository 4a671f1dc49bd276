import { readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import type { ExcitationAnalysis } from '../analysis/excitation.js';
import { powerDb } from '../dsp/level.js';
import { RULE, labelsOf, type PolicyFigures } from '../replay/compare.js';
import type { Summary } from '../replay/summary.js';
import { VERSION } from '../version.js';
import { decimate } from './decimate.js';

/**
 * The replay report: one self-contained HTML file (uPlot and the data inlined, nothing fetched)
 * that opens offline. Per policy: error power and cancellation of both paths with the supervisor's
 * decisions marked (hover one for its failed criteria), weight mean and max |w| against their
 * limits, the final taps; once: the comparison table, the reference spectrum and, when given, the
 * excitation analysis. Series longer than DISPLAY_COLUMNS windows are min/max decimated.
 */

const DISPLAY_COLUMNS = 1500;

export interface ReportInput {
  readonly recording: string;
  readonly durationSeconds: number;
  readonly sampleRate: number;
  readonly summaries: readonly Summary[];
  readonly figures: readonly PolicyFigures[];
  readonly gate: { baseline: string; worse: Record<string, string[]> } | null;
  readonly spectrum: { frequencies: readonly number[]; psd: readonly number[] } | null;
  readonly analysis: ExcitationAnalysis | null;
}

const require = createRequire(import.meta.url);
export const UPLOT_JS = readFileSync(require.resolve('uplot/dist/uPlot.iife.min.js'), 'utf8');
export const UPLOT_CSS = readFileSync(require.resolve('uplot/dist/uPlot.min.css'), 'utf8');

/**
 * Decision markers, at most one accepted and one refused per display column (the refused one with
 * the lowest adaptive cancellation), so a week of decisions draws as fast as a minute.
 */
function markers(s: Summary) {
  const span = Math.max(s.durationSeconds, 1e-9);
  const kept = new Map<string, Summary['events'][number]>();
  for (const e of s.events) {
    if (e.outcome !== 'accepted' && e.outcome !== 'rejected') continue;
    const key = `${e.outcome}:${Math.floor((e.timeSeconds / span) * DISPLAY_COLUMNS)}`;
    const had = kept.get(key);
    if (had === undefined || (e.outcome === 'rejected' && e.adaptive.cancellationDb < had.adaptive.cancellationDb)) kept.set(key, e);
  }
  return [...kept.values()]
    .sort((a, b) => a.timeSeconds - b.timeSeconds)
    .map((e) => ({
      t: e.timeSeconds,
      accepted: e.outcome === 'accepted',
      failed: e.failed,
      rollback: e.rollback,
      a: e.adaptive.cancellationDb,
      f: {
        adaptiveErrorPowerDb: e.adaptive.errorPowerDb,
        adaptiveCancellationDb: e.adaptive.cancellationDb,
        cleanCancellationDb: e.clean.cancellationDb,
        adaptiveWeightMean: e.adaptive.weightMean,
      },
    }));
}

function policyData(s: Summary, name: string) {
  const t = s.series.map((p) => p.timeSeconds);
  const pick = (f: (p: Summary['series'][number]) => number) => s.series.map(f);
  const power = decimate(t, [pick((p) => p.desiredPowerDb), pick((p) => p.adaptive.errorPowerDb), pick((p) => p.clean.errorPowerDb)], DISPLAY_COLUMNS);
  const cancellation = decimate(t, [pick((p) => p.adaptive.cancellationDb), pick((p) => p.clean.cancellationDb)], DISPLAY_COLUMNS);
  const weights = decimate(
    t,
    [pick((p) => p.adaptive.weightMean), pick((p) => p.clean.weightMean), pick((p) => p.adaptive.maxAbsWeight), pick((p) => p.clean.maxAbsWeight)],
    DISPLAY_COLUMNS,
  );
  // A float arithmetic's guard (filter.weightLimit) far above the weights would flatten the plot.
  let maxSeen = 0;
  for (const p of s.series) maxSeen = Math.max(maxSeen, p.adaptive.maxAbsWeight);
  return {
    name,
    weightLimitShown: s.limits.weight <= 10 * maxSeen ? s.limits.weight : null,
    filter: `${s.config.filter.algorithm} ${s.config.filter.taps} taps, step ${s.config.filter.step}, ${s.config.filter.arithmetic}/${s.config.filter.rounding}`,
    limits: s.limits,
    drift: s.drift,
    windows: s.windows,
    power,
    cancellation,
    weights,
    events: markers(s),
    taps: { adaptive: s.weights.adaptive, clean: s.weights.clean },
  };
}

function escapeScript(json: string): string {
  return json.replace(/</g, '\\u003c');
}

export function renderReport(input: ReportInput): string {
  const spectrum =
    input.spectrum === null
      ? null
      : decimate(input.spectrum.frequencies, [input.spectrum.psd.map((v) => powerDb(v))], DISPLAY_COLUMNS);
  const names = labelsOf(input.summaries);
  const data = {
    title: `tapwarden report: ${input.recording}`,
    version: VERSION,
    generated: new Date().toISOString(),
    recording: input.recording,
    durationSeconds: input.durationSeconds,
    sampleRate: input.sampleRate,
    rule: RULE,
    figures: input.figures,
    gate: input.gate,
    spectrum,
    analysis: input.analysis,
    policies: input.summaries.map((s, i) => policyData(s, names[i]!)),
  };
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>${escapeHtml(data.title)}</title>
<style>${UPLOT_CSS}
body { font: 14px/1.4 system-ui, sans-serif; margin: 1.5em; color: #222; }
h1 { font-size: 1.3em; } h2 { font-size: 1.1em; margin-top: 2em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; margin: 0.5em 0; } td, th { padding: 0.2em 0.7em; border-bottom: 1px solid #eee; text-align: right; }
td:first-child, th:first-child { text-align: left; }
.plot { margin: 0.8em 0; position: relative; } .note { color: #666; font-size: 0.9em; }
.worse { color: #b00; } tr.suggested td { background: #eef6e8; font-weight: 600; } .ok { color: #070; } .poor { color: #b00; } .marginal { color: #a60; }
#tip { position: fixed; pointer-events: none; background: #fff; border: 1px solid #888; padding: 0.3em 0.5em; font-size: 12px; display: none; z-index: 10; max-width: 28em; }
</style>
</head>
<body>
<h1 id="title"></h1>
<p class="note" id="meta"></p>
<div id="comparison"></div>
<div id="spectrum-section"></div>
<div id="analysis"></div>
<div id="policies"></div>
<div id="tip"></div>
<script>${UPLOT_JS}</script>
<script type="application/json" id="report-data">${escapeScript(JSON.stringify(data))}</script>
<script>${REPORT_SCRIPT}</script>
</body>
</html>
`;
}

function escapeHtml(s: string): string {
  return s.replace(/[&<>"]/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;' })[c]!);
}

/** The page's own script: builds the tables and the uPlot charts from the embedded data. */
const REPORT_SCRIPT = String.raw`
(function () {
  const D = JSON.parse(document.getElementById('report-data').textContent);
  const el = (tag, attrs, text) => { const e = document.createElement(tag); Object.assign(e, attrs || {}); if (text !== undefined) e.textContent = text; return e; };
  const tip = document.getElementById('tip');
  const width = () => Math.max(480, Math.min(1100, document.body.clientWidth - 40));
  document.getElementById('title').textContent = D.title;
  document.getElementById('meta').textContent = D.durationSeconds.toFixed(1) + ' s at ' + D.sampleRate + ' Hz; tapwarden ' + D.version + ', ' + D.generated;
  window.tapwardenPlots = [];

  // Comparison table (replays only)
  const cmp = document.getElementById('comparison');
  const dB = (v) => (v === null ? 'n/a' : v.toFixed(1) + ' dB');
  if (D.figures.length) {
    cmp.appendChild(el('h2', {}, 'Policies'));
    const t = el('table');
    const head = ['policy', 'clean healthy', 'median cancellation', '5th percentile', 'worst burst', 'first handoff', 'handoffs', 'refused', 'weight sat.', 'signal sat.', 'max |weight mean|', 'verdict'];
    const tr = el('tr'); head.forEach((h) => tr.appendChild(el('th', {}, h))); t.appendChild(tr);
    D.figures.forEach((f) => {
      const r = el('tr');
      const b = f.worstBurst;
      const worse = D.gate && D.gate.worse[f.name];
      [f.name, (100 * f.healthyShare).toFixed(1) + ' %', dB(f.cleanCancellationMedianDb), dB(f.cleanCancellationP5Db),
       b ? b.seconds.toFixed(1) + ' s at ' + b.peakErrorPowerDb.toFixed(0) + ' dB' : 'none',
       f.timeToFirstHandoffSeconds === null ? 'never' : f.timeToFirstHandoffSeconds.toFixed(1) + ' s', f.handoffsAccepted, f.handoffsRejected,
       f.saturations.weights, f.saturations.signal, f.maxAbsWeightMean.toFixed(4)].forEach((v) => r.appendChild(el('td', {}, String(v))));
      const v = el('td', { className: f.verdict }, f.verdict + (D.gate ? (!worse ? ' (baseline)' : worse.length ? ' worse: ' + worse.join('; ') : ' not worse') : ''));
      if (worse && worse.length) v.className = 'worse';
      r.appendChild(v); t.appendChild(r);
    });
    cmp.appendChild(t);
    const j = D.figures[0].judgedAt;
    cmp.appendChild(el('p', { className: 'note' }, 'Every policy judged against one threshold: clean healthy means clean-path cancellation >= ' + j.minCancellationDb + ' dB (from ' + j.source +
      '). Bursts count after the first handoff; the convergence before it is the first-handoff column. Verdict ok: healthy >= ' +
      100 * D.rule.okHealthyShare + ' %, no adaptive weight saturation, no burst over ' + D.rule.okLongestBurstSeconds + ' s; poor: healthy < ' + 100 * D.rule.poorHealthyShare +
      ' % or a burst over ' + D.rule.poorLongestBurstSeconds + ' s.'));
  }

  function plot(container, title, opts, data, draw) {
    const box = el('div', { className: 'plot' });
    box.dataset.title = title;
    container.appendChild(el('h3', {}, title));
    container.appendChild(box);
    const u = new uPlot(Object.assign({ width: width(), height: 240, legend: { live: true }, hooks: {} }, opts), data, box);
    window.tapwardenPlots.push({ title, plot: u });
    return u;
  }
  const lines = (labels, colors, unit) => labels.map((l, i) => ({ label: l, stroke: colors[i], width: 1, value: (u, v) => (v == null ? '-' : v.toFixed(unit === 'w' ? 4 : 1)) }));

  // Reference spectrum
  if (D.spectrum) {
    const s = document.getElementById('spectrum-section');
    s.appendChild(el('h2', {}, 'Reference spectrum (Welch, one-sided)'));
    const bands = D.analysis ? D.analysis.unexcitedBands : [];
    plot(s, 'Reference power spectral density', {
      scales: { x: { time: false } },
      axes: [{ label: 'Hz' }, { label: 'dB re FS^2/Hz' }],
      series: [{}, { label: 'PSD', stroke: '#246', width: 1 }],
      hooks: { drawClear: [(u) => {
        const ctx = u.ctx; ctx.save(); ctx.fillStyle = 'rgba(200,60,60,0.12)';
        bands.forEach((b) => { const x0 = u.valToPos(b.loHz, 'x', true), x1 = u.valToPos(b.hiHz, 'x', true); ctx.fillRect(x0, u.bbox.top, Math.max(1, x1 - x0), u.bbox.height); });
        ctx.restore();
      }] },
    }, [D.spectrum.t, D.spectrum.ys[0]]);
    if (bands.length) s.appendChild(el('p', { className: 'note' }, 'Shaded: bands with no energy (unexcited): ' + bands.map((b) => b.loHz.toFixed(0) + '-' + b.hiHz.toFixed(0) + ' Hz').join(', ')));
  }

  // Excitation analysis
  if (D.analysis) {
    const a = D.analysis;
    const s = document.getElementById('analysis');
    s.appendChild(el('h2', {}, 'Excitation of the reference (' + a.taps + ' taps)'));
    const rows = [['samples used', a.samplesUsed + ' (' + (a.samplesUsed / D.sampleRate).toFixed(1) + ' s' + (a.windowsExcluded ? '; ' + a.windowsExcluded + ' faulty windows left out' : '') + ')'],
      ['lambda_max', a.lambdaMax.toExponential(3)], ['lambda_min', a.lambdaMin.toExponential(3)],
      ['eigenvalue spread', a.eigenvalueSpread === null ? 'unbounded' : a.eigenvalueSpread.toExponential(2)],
      ['unexcited directions (< ' + a.thresholdDb + ' dB re lambda_max)', a.unexcitedDirections + ' of ' + a.taps],
      ['weight-mean direction', a.meanDirectionDb.toFixed(1) + ' dB re lambda_max'],
      ['LMS mean bound 2/(lambda_max + leak)', a.stepBounds.lms.toPrecision(4)], ['LMS mean-square bound 2/tr(R + leak I)', a.stepBounds.lmsTraceBound.toPrecision(4)],
      ['NLMS step bound', '0 < step < ' + a.stepBounds.nlms]];
    if (a.leak) rows.push(['suggested leak (loss <= ' + a.leak.maxLossDb + ' dB)', a.leak.suggested === null ? 'none qualifies' : a.leak.suggested.toExponential(2) + ' (filter.leak ' + a.leak.suggestedConfig.toExponential(2) + ' for ' + a.leak.algorithm + ')']);
    const tb = el('table'); rows.forEach(([k, v]) => { const r = el('tr'); r.appendChild(el('td', {}, k)); r.appendChild(el('td', {}, v)); tb.appendChild(r); });
    s.appendChild(tb);
    const floor = a.lambdaMax * Math.pow(10, a.thresholdDb / 10);
    const exp = (u, splits) => splits.map((v) => (v == null ? '' : v.toExponential(0)));
    plot(s, 'Eigenvalues of R', { scales: { x: { time: false }, y: { distr: 3 } }, axes: [{ label: 'index' }, { label: 'eigenvalue', values: exp, size: 70 }],
      series: [{}, { label: 'lambda', stroke: '#6b3d1f', width: 1, points: { show: true } }, { label: 'threshold (' + a.thresholdDb + ' dB)', stroke: '#c23', width: 1, dash: [6, 4] }] },
      [a.eigenvalues.map((_, i) => i), a.eigenvalues.map((v) => (v > 0 ? v : null)), a.eigenvalues.map(() => floor)]);
    if (a.leak) {
      s.appendChild(el('h3', {}, 'Leak candidates'));
      const lt = el('table');
      const h = el('tr'); ['leak (re R)', 'filter.leak', 'relative bias', 'predicted cancellation', 'loss', 'worst window loss'].forEach((x) => h.appendChild(el('th', {}, x))); lt.appendChild(h);
      a.leak.candidates.forEach((c) => {
        const r = el('tr');
        if (c.leak === a.leak.suggested) r.className = 'suggested';
        [c.leak.toExponential(2), c.configLeak.toExponential(2), (100 * c.relativeBias).toFixed(2) + ' %', c.cancellationDb.toFixed(1) + ' dB', c.lossDb.toFixed(2) + ' dB', c.worstSegmentLossDb.toFixed(2) + ' dB'].forEach((v) => r.appendChild(el('td', {}, v)));
        lt.appendChild(r);
      });
      s.appendChild(lt);
      s.appendChild(el('p', { className: 'note' }, 'Predicted from R and p over the whole selection, and window by window (each supervisor window its own exact covariance): the suggestion is the largest leak whose loss stays within ' + a.leak.maxLossDb + ' dB in every window.'));
    }
  }

  // Per policy
  const ps = document.getElementById('policies');
  D.policies.forEach((p) => {
    const sec = el('section'); sec.dataset.policy = p.name; ps.appendChild(sec);
    sec.appendChild(el('h2', {}, 'Policy ' + p.name + ': ' + p.filter));
    const d = p.drift;
    sec.appendChild(el('p', { className: 'note' }, p.windows === 0 ? 'No supervisor window completed: the recording is shorter than one window.' :
      d.firstLimitSeconds !== null ? 'A tap reached the weight limit at ' + d.firstLimitSeconds.toFixed(1) + ' s.' :
      d.final.limitEtaSeconds === null ? 'At the end the weights were not drifting toward the limit.' :
      'At the end the weights were drifting: tap ' + d.final.limitTap + ' would reach the limit in about ' + d.final.limitEtaSeconds.toFixed(0) + ' s (' +
        d.final.limitEtaLowSeconds.toFixed(0) + ' to ' + (d.final.limitEtaHighSeconds === null ? 'unbounded' : d.final.limitEtaHighSeconds.toFixed(0) + ' s') + ').'));

    // decision markers, drawn over a plot, hover for the failed criteria
    const markers = (key) => ({
      draw: [(u) => {
        const ctx = u.ctx; ctx.save();
        p.events.forEach((e) => {
          const x = u.valToPos(e.t, 'x', true); const y = u.valToPos(key(e), 'y', true);
          if (!isFinite(x) || !isFinite(y)) return;
          ctx.fillStyle = e.accepted ? '#0a0' : '#d00'; ctx.beginPath();
          if (e.accepted) { ctx.moveTo(x, y - 6); ctx.lineTo(x - 5, y + 4); ctx.lineTo(x + 5, y + 4); } else { ctx.moveTo(x, y + 6); ctx.lineTo(x - 5, y - 4); ctx.lineTo(x + 5, y - 4); }
          ctx.fill();
        });
        ctx.restore();
      }],
      setCursor: [(u) => {
        const left = u.cursor.left;
        if (left == null || left < 0) { tip.style.display = 'none'; return; }
        let best = null, bestD = 8;
        p.events.forEach((e) => { const dx = Math.abs(u.valToPos(e.t, 'x') - left); if (dx < bestD) { bestD = dx; best = e; } });
        if (!best) { tip.style.display = 'none'; return; }
        const r = u.over.getBoundingClientRect();
        tip.style.display = 'block'; tip.style.left = (r.left + left + 12) + 'px'; tip.style.top = (r.top + (u.cursor.top || 0) + 12) + 'px';
        tip.textContent = (best.accepted ? 'handoff accepted' : 'handoff refused') + ' at ' + best.t.toFixed(1) + ' s' +
          (best.failed.length ? '; failed: ' + best.failed.join(', ') : '') + (best.rollback ? '; rolled back' : '') +
          '; adaptive cancellation ' + best.f.adaptiveCancellationDb.toFixed(1) + ' dB, clean ' + best.f.cleanCancellationDb.toFixed(1) + ' dB, weight mean ' + best.f.adaptiveWeightMean.toFixed(4);
      }],
    });
    const time = { scales: { x: { time: false } } };
    plot(sec, 'Error power by path', Object.assign({}, time, { axes: [{ label: 's' }, { label: 'dB re FS' }],
      series: [{}].concat(lines(['desired', 'adaptive error', 'clean error'], ['#999', '#c60', '#06c'])), hooks: markers((e) => e.f.adaptiveErrorPowerDb) }),
      [p.power.t].concat(p.power.ys));
    plot(sec, 'Cancellation by path', Object.assign({}, time, { axes: [{ label: 's' }, { label: 'dB' }],
      series: [{}].concat(lines(['adaptive', 'clean'], ['#c60', '#06c'])), hooks: markers((e) => e.a) }),
      [p.cancellation.t].concat(p.cancellation.ys));
    const L = p.weightLimitShown, M = p.limits.weightMean;
    plot(sec, 'Weight mean and max |w|', Object.assign({}, time, { axes: [{ label: 's' }, { label: 'full scale' }],
      series: [{}].concat(lines(['adaptive mean', 'clean mean', 'adaptive max |w|', 'clean max |w|', 'arithmetic limit', 'mean bound', '-mean bound'],
        ['#c60', '#06c', '#a40', '#048', '#d00', '#b0b', '#b0b'], 'w')) }),
      [p.weights.t].concat(p.weights.ys, [p.weights.t.map(() => L), p.weights.t.map(() => M), p.weights.t.map(() => -M)]));
    plot(sec, 'Final taps', { scales: { x: { time: false } }, axes: [{ label: 'tap' }, { label: 'weight' }],
      series: [{}].concat(lines(['adaptive', 'clean'], ['#c60', '#06c'], 'w')) },
      [p.taps.adaptive.map((_, i) => i), p.taps.adaptive, p.taps.clean]);
  });
})();
`;
