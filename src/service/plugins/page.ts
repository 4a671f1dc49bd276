import type { FastifyPluginAsync } from 'fastify';
import { UPLOT_CSS, UPLOT_JS } from '../../report/html.js';

/**
 * GET /: the live page. Self-contained (uPlot inlined, nothing loaded from elsewhere): it follows
 * /api/feed, plots both paths' cancellation and error power and the weight mean against its
 * bound over the last minutes with handoffs marked (a hovered window's failed criteria shown), the
 * taps of both paths, the last decisions with their failed criteria, the stream state, overruns,
 * the drift forecast and the last capture, one measurement channel at a time; with the control
 * token typed in, it offers the operator actions (for the channel shown) and the mark. It
 * reconnects by itself when the service restarts.
 */
const PAGE_SCRIPT = String.raw`
(function () {
  const KEEP_SECONDS = 300;
  const $ = (id) => document.getElementById(id);
  // Per measurement channel: the last minutes of windows, and its last figures.
  const channels = new Map();
  const track = (ch) => {
    if (!channels.has(ch)) channels.set(ch, { t: [], aC: [], cC: [], aE: [], cE: [], mean: [], outcome: [], failed: [], decisions: [], forecast: null });
    return channels.get(ch);
  };
  let shown = null, bound = null, plots = null, received = 0, socket = null, retry = 500;
  const rowsOf = () => track(shown);
  const width = () => Math.max(420, Math.min(1100, document.body.clientWidth - 40));
  const marks = (u) => {
    const rows = rowsOf(), ctx = u.ctx;
    for (let i = 0; i < rows.t.length; i++) {
      const o = rows.outcome[i];
      if (o !== 'accepted' && o !== 'rejected') continue;
      const x = u.valToPos(rows.t[i], 'x', true);
      ctx.save(); ctx.strokeStyle = o === 'accepted' ? '#2a9d8f' : '#c8553d'; ctx.lineWidth = 1.5;
      ctx.beginPath(); ctx.moveTo(x, u.bbox.top); ctx.lineTo(x, u.bbox.top + u.bbox.height); ctx.stroke(); ctx.restore();
    }
  };
  // Hovering a window shows its outcome and failed criteria.
  const hover = (u) => {
    const i = u.cursor.idx, rows = rowsOf();
    if (i == null || i >= rows.t.length) return;
    $('hover').textContent = rows.t[i].toFixed(1) + ' s: ' + rows.outcome[i] + (rows.failed[i].length ? ' (failed: ' + rows.failed[i].join(', ') + ')' : '');
  };
  function makePlots() {
    const common = { width: width(), height: 200, hooks: { draw: [marks], setCursor: [hover] }, scales: { x: { time: false } }, legend: { live: true } };
    const c = new uPlot({ ...common, title: 'cancellation (dB)', series: [{ label: 'stream s' }, { label: 'adaptive', stroke: '#e09f3e' }, { label: 'clean', stroke: '#335c67', width: 2 }] }, [[], [], []], $('plot-cancel'));
    const e = new uPlot({ ...common, title: 'error power (dB re FS)', series: [{ label: 'stream s' }, { label: 'adaptive', stroke: '#e09f3e' }, { label: 'clean', stroke: '#335c67', width: 2 }] }, [[], [], []], $('plot-power'));
    const m = new uPlot({ ...common, title: 'adaptive weight mean and its bound', series: [{ label: 'stream s' }, { label: 'mean', stroke: '#540b0e' }, { label: '+bound', stroke: '#999', dash: [4, 4] }, { label: '-bound', stroke: '#999', dash: [4, 4] }] }, [[], [], [], []], $('plot-mean'));
    const w = new uPlot({ width: width(), height: 200, title: 'taps', scales: { x: { time: false } }, series: [{ label: 'tap' }, { label: 'clean', stroke: '#335c67', width: 2 }, { label: 'adaptive', stroke: '#e09f3e' }] }, [[], [], []], $('plot-taps'));
    window.tapwardenLive = { plots: [c, e, m, w], channels };
    return [c, e, m, w];
  }
  function redraw() {
    plots ??= makePlots();
    const rows = rowsOf(), b = bound ?? 0;
    plots[0].setData([rows.t, rows.aC, rows.cC]);
    plots[1].setData([rows.t, rows.aE, rows.cE]);
    plots[2].setData([rows.t, rows.mean, rows.t.map(() => b), rows.t.map(() => -b)]);
    const body = $('decisions');
    body.textContent = '';
    for (const r of rows.decisions) {
      const tr = document.createElement('tr');
      tr.className = r.outcome;
      const failed = (r.failed || []).join(', ');
      for (const v of [r.timeSeconds.toFixed(1) + ' s', r.outcome, r.clean.cancellationDb.toFixed(1) + ' dB', r.adaptive.cancellationDb.toFixed(1) + ' dB', r.adaptive.weightMean.toExponential(2), failed || '-']) {
        const td = document.createElement('td'); td.textContent = v; tr.appendChild(td);
      }
      if (failed) tr.title = 'failed: ' + failed;
      body.appendChild(tr);
    }
    const f = rows.forecast;
    $('forecast').textContent = f == null ? 'no data yet' : f.limitEtaSeconds != null ? 'weight limit in about ' + Math.round(f.limitEtaSeconds) + ' s (tap ' + f.limitTap + ')' : 'no drift toward the weight limit';
  }
  function decision(r) {
    received++;
    $('received').textContent = String(received);
    const rows = track(r.channel);
    rows.t.push(r.timeSeconds); rows.aC.push(r.adaptive.cancellationDb); rows.cC.push(r.clean.cancellationDb);
    rows.aE.push(r.adaptive.errorPowerDb); rows.cE.push(r.clean.errorPowerDb); rows.mean.push(r.adaptive.weightMean);
    rows.outcome.push(r.outcome); rows.failed.push(r.failed || []);
    while (rows.t.length && rows.t[0] < r.timeSeconds - KEEP_SECONDS) for (const k of ['t', 'aC', 'cC', 'aE', 'cE', 'mean', 'outcome', 'failed']) rows[k].shift();
    rows.decisions.unshift(r);
    if (rows.decisions.length > 12) rows.decisions.length = 12;
    rows.forecast = r.forecast;
    if (r.channel === shown) redraw();
  }
  async function taps() {
    if (shown === null) return;
    const get = (path) => fetch('/api/weights?path=' + path + '&channel=' + shown).then((r) => r.json());
    const [c, a] = await Promise.all([get('clean'), get('adaptive')]);
    if (!c.weights || !a.weights) return;
    plots ??= makePlots();
    plots[3].setData([c.weights.map((_, k) => k), c.weights, a.weights]);
    $('taps-version').textContent = 'clean version ' + c.cleanVersion;
  }
  function status(s) {
    const e = s.engine || {};
    $('stream').textContent = (s.stream && s.stream.state) || '?';
    $('overruns').textContent = e.queue == null ? '?' : String(e.queue.overruns);
    const mine = (s.channels || []).find((c) => c.channel === shown) || e;
    $('flags').textContent = (mine.adapting === false ? 'adaptation frozen' : 'adapting') + ', ' + (mine.handoffsHeld ? 'handoffs held' : 'handoffs allowed') + ', clean version ' + mine.cleanVersion;
  }
  function connect() {
    const url = (location.protocol === 'https:' ? 'wss://' : 'ws://') + location.host + '/api/feed';
    socket = new WebSocket(url);
    socket.onopen = () => { retry = 500; $('link').textContent = 'connected'; $('link').className = 'up'; };
    socket.onmessage = (ev) => {
      const m = JSON.parse(ev.data);
      if (m.type === 'decision') decision(m);
      else if (m.type === 'status') status(m);
      else if (m.type === 'capture') $('last-capture').textContent = m.file.split('/').pop() + ' (' + m.causes.map((c) => c.cause).join(', ') + ')';
      else if (m.type === 'handoff' || m.type === 'rollback' || m.type === 'settings') {
        if (m.channel === shown) $('last-event').textContent = m.type + (m.reason ? ' (' + m.reason + ')' : '') + ' at ' + m.timeSeconds.toFixed(1) + ' s';
        if (m.type === 'handoff' && m.channel === shown) taps().catch(() => {});
      }
    };
    socket.onclose = () => {
      $('link').textContent = 'reconnecting'; $('link').className = 'down';
      setTimeout(connect, retry); retry = Math.min(8000, retry * 2);
    };
    socket.onerror = () => socket.close();
  }
  async function control(path, body) {
    const token = $('token').value;
    const r = await fetch(path, { method: 'POST', headers: { 'content-type': 'application/json', authorization: 'Bearer ' + token }, body: JSON.stringify({ ...body, channel: shown }) });
    const j = await r.json().catch(() => ({}));
    $('control-result').textContent = !r.ok ? (j.error ? j.error.code + ': ' + j.error.message : 'HTTP ' + r.status) : j.cleanVersion != null ? 'done: channel ' + shown + ', clean version ' + j.cleanVersion : 'done: ' + j.capture;
    return r.ok;
  }
  $('do-handoff').onclick = () => control('/api/control/handoff', {});
  $('do-rollback').onclick = () => control('/api/control/rollback', {});
  $('do-mark').onclick = () => control('/api/control/mark', $('note').value ? { note: $('note').value } : {});
  $('do-hold').onclick = (ev) => control('/api/control/handoffs', { frozen: ev.target.dataset.on !== '1' }).then((ok) => { if (!ok) return; ev.target.dataset.on = ev.target.dataset.on === '1' ? '0' : '1'; ev.target.textContent = ev.target.dataset.on === '1' ? 'allow handoffs' : 'hold handoffs'; });
  $('do-freeze').onclick = (ev) => control('/api/control/adaptation', { frozen: ev.target.dataset.on !== '1' }).then((ok) => { if (!ok) return; ev.target.dataset.on = ev.target.dataset.on === '1' ? '0' : '1'; ev.target.textContent = ev.target.dataset.on === '1' ? 'resume adaptation' : 'freeze adaptation'; });
  $('token').oninput = () => { for (const b of document.querySelectorAll('#controls button')) b.disabled = $('token').value.length < 16; };
  $('channel').onchange = () => { shown = Number($('channel').value); $('last-event').textContent = 'none'; redraw(); taps().catch(() => {}); };
  fetch('/api/status').then((r) => r.json()).then((s) => {
    bound = s.supervisor.maxWeightMean;
    $('title').textContent = 'tapwarden ' + s.version + ': ' + s.stream.description;
    for (const c of s.channels) {
      const o = document.createElement('option'); o.value = String(c.channel); o.textContent = 'channel ' + c.channel; $('channel').appendChild(o);
    }
    shown = s.channels[0].channel;
    status(s);
    redraw();
    taps().catch(() => {});
  }).catch(() => {});
  setInterval(() => taps().catch(() => {}), 3000);
  connect();
})();
`;

const PAGE = `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>tapwarden live</title>
<style>${UPLOT_CSS}
body { font: 14px/1.45 "DejaVu Sans", system-ui, sans-serif; margin: 0; color: #1b1f24; background: #f4f1ea; }
header { background: #1b1f24; color: #f4f1ea; padding: 0.7em 1.5em; display: flex; gap: 2em; align-items: baseline; flex-wrap: wrap; }
header h1 { font-size: 1.05em; margin: 0; letter-spacing: 0.04em; }
main { padding: 1em 1.5em; }
.facts { display: flex; gap: 1.5em; flex-wrap: wrap; margin-bottom: 0.6em; } .facts b { font-weight: 600; }
.up { color: #2a9d8f; } .down { color: #c8553d; }
table { border-collapse: collapse; margin-top: 0.5em; } td, th { padding: 0.2em 0.8em; border-bottom: 1px solid #ddd6c8; text-align: right; }
td:first-child, th:first-child { text-align: left; }
tr.rejected td { color: #c8553d; } tr.accepted td { color: #2a9d8f; font-weight: 600; }
#controls { margin: 1em 0; padding: 0.6em 0.8em; border-left: 4px solid #e09f3e; background: #fffaf0; }
#controls input { width: 22em; font-family: monospace; } button { margin-left: 0.4em; }
.note { color: #6b6f76; font-size: 0.9em; }
.pick { display: inline-block; margin: 0.3em 0 0.6em; font-weight: 600; } #controls br + label { display: inline-block; margin-top: 0.5em; }
</style>
</head>
<body>
<header><h1 id="title">tapwarden live</h1><span>feed: <b id="link" class="down">connecting</b></span><span>decisions received: <b id="received">0</b></span></header>
<main>
<div class="facts">
<span>stream: <b id="stream">?</b></span><span>overruns: <b id="overruns">?</b></span><span>engine: <b id="flags">?</b></span>
<span>last event: <b id="last-event">none</b></span><span>drift: <b id="forecast">no data yet</b></span><span>last capture: <b id="last-capture">none</b></span>
</div>
<label class="pick">measurement <select id="channel"></select></label>
<div id="plot-cancel"></div><div id="plot-power"></div><div id="plot-mean"></div>
<p class="note">Vertical marks: accepted handoffs (green) and refused windows (red). <span id="hover">Hover a plot for a window's outcome and failed criteria.</span></p>
<div id="plot-taps"></div><p class="note" id="taps-version"></p>
<h2>Last decisions</h2>
<table><thead><tr><th>time</th><th>outcome</th><th>clean</th><th>adaptive</th><th>weight mean</th><th>failed</th></tr></thead><tbody id="decisions"></tbody></table>
<div id="controls">
<label>control token <input id="token" type="password" autocomplete="off" placeholder="the service's control token"></label>
<button id="do-handoff" disabled>hand over now</button><button id="do-hold" disabled>hold handoffs</button><button id="do-freeze" disabled>freeze adaptation</button><button id="do-rollback" disabled>roll back</button>
<br><label>note <input id="note" maxlength="500" placeholder="what the operator saw"></label><button id="do-mark" disabled>mark and capture</button>
<span id="control-result" class="note"></span>
</div>
</main>
<script>${UPLOT_JS}</script>
<script>${PAGE_SCRIPT}</script>
</body>
</html>
`;

export const pagePlugin: FastifyPluginAsync = async (app) => {
  app.get('/', async (_req, reply) => reply.type('text/html; charset=utf-8').send(PAGE));
  // Browsers ask for it; the page has none.
  app.get('/favicon.ico', async (_req, reply) => reply.code(204).send());
};
