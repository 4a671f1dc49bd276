import { connect } from 'node:net';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { WavWriter } from '../../src/io/wav/writer.js';
import { bandLimited, through, white } from '../helpers/signals.js';
import { cli, tmpDir } from '../helpers/tools.js';
import { serveWith, stopAll, until, type Served } from '../helpers/serve.js';

// tapwarden serve driven by real HTTP and WebSocket clients on loopback. No assertion here is
// about time: each is a count (frames processed against frames fed, overruns, one status message
// per engine tick) or a reply.

const TOKEN = 'bench-7-control-token-0123456789';

/** Parses Prometheus text exposition into name -> TYPE. */
function types(text: string): Map<string, string> {
  const m = new Map<string, string>();
  for (const line of text.split('\n')) {
    const t = /^# TYPE (\S+) (\S+)$/.exec(line);
    if (t) m.set(t[1]!, t[2]!);
  }
  return m;
}

/** A short stereo WAV: 16 kHz, `seconds` long, a reference through a short path. */
function recording(dir: string, seconds: number, rate = 16000): { file: string; frames: number } {
  const n = Math.round(seconds * rate);
  const x = bandLimited(n, 0.03, 0.3, 0.15, 1101);
  const d = through([0.6, -0.3, 0.2, 0.1], x, white(n, 0.002, 1102));
  const file = join(dir, `rec-${seconds}.wav`);
  const w = new WavWriter(file, rate, 2, 'pcm16');
  w.write([x, d], n);
  w.close();
  return { file, frames: n };
}

describe('the HTTP surface of a running service', () => {
  const dir = tmpDir();
  let s: Served;
  beforeAll(async () => {
    s = await serveWith(dir, 'feed:\n  intervalSeconds: 0.1\n  maxClients: 3\n  maxMessageBytes: 256\n', { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    await until(async () => (await s.metric('tapwarden_handoffs_accepted_total{channel="1",reason="supervisor"}')) > 0, 30_000, 'a handoff');
  });
  afterAll(async () => {
    expect(await s.stop()).toBe(0);
  });

  it('serves /metrics with the documented names and types (Prometheus naming practice)', async () => {
    const res = await s.get('/metrics');
    expect(res.headers.get('content-type')).toMatch(/^text\/plain; version=0\.0\.4/);
    const t = types(await res.text());
    const expected: Record<string, string> = {
      tapwarden_samples_processed_total: 'counter',
      tapwarden_blocks_processed_total: 'counter',
      tapwarden_block_processing_seconds: 'histogram',
      tapwarden_handoffs_accepted_total: 'counter',
      tapwarden_handoffs_rejected_total: 'counter',
      tapwarden_error_power_db: 'gauge',
      tapwarden_cancellation_db: 'gauge',
      tapwarden_weight_mean: 'gauge',
      tapwarden_weight_norm: 'gauge',
      tapwarden_weight_max_abs: 'gauge',
      tapwarden_saturations_total: 'counter',
      tapwarden_nonfinite_input_samples_total: 'counter',
      tapwarden_outofrange_input_samples_total: 'counter',
      tapwarden_queue_overruns_total: 'counter',
      tapwarden_queue_underruns_total: 'counter',
      tapwarden_playback_dropped_blocks_total: 'counter',
      tapwarden_feed_refused_messages_total: 'counter',
      tapwarden_stream_up: 'gauge',
      tapwarden_last_handoff_age_seconds: 'gauge',
      process_cpu_seconds_total: 'counter',
    };
    for (const [name, type] of Object.entries(expected)) expect(t.get(name), name).toBe(type);
    for (const [name, type] of t) {
      if (type === 'counter') expect(name, name).toMatch(/_total$/);
      expect(name).toMatch(/^(tapwarden_|process_|nodejs_)/);
    }
  });

  it('labels per-path figures, saturations by what clipped, rejections by criterion', async () => {
    const text = await (await s.get('/metrics')).text();
    for (const p of ['adaptive', 'clean']) expect(text).toMatch(new RegExp(`^tapwarden_cancellation_db\\{channel="1",path="${p}"\\} -?[\\d.]+`, 'm'));
    expect(text).toMatch(/^tapwarden_saturations_total\{channel="1",path="adaptive",store="weights"\} \d+/m);
    expect(text).toMatch(/^tapwarden_saturations_total\{channel="1",path="adaptive",store="signal"\} \d+/m);
    expect(text).toMatch(/^tapwarden_handoffs_rejected_total\{channel="1",criterion="weightMean"\} \d+/m);
    expect(text).toMatch(/^tapwarden_handoffs_rejected_total\{channel="1",criterion="outOfRange"\} \d+/m);
  });

  it('healthz, readyz, status and weights', async () => {
    expect(await (await s.get('/healthz')).json()).toEqual({ status: 'alive' });
    expect((await s.get('/readyz')).status).toBe(200);
    const st = (await (await s.get('/api/status')).json()) as Record<string, any>;
    expect(st['stream'].up).toBe(true);
    expect(st['filter'].taps).toBe(64);
    expect(st['recentDecisions'].length).toBeGreaterThan(0);
    expect(st['recentDecisions'][0]).toMatchObject({ type: 'decision', outcome: expect.any(String), adaptive: { cancellationDb: expect.any(Number) }, forecast: expect.any(Object) });
    const w = (await (await s.get('/api/weights?path=clean')).json()) as { weights: number[] };
    expect(w.weights).toHaveLength(64);
    const bad = await s.get('/api/weights?path=both');
    expect(bad.status).toBe(400);
    expect(((await bad.json()) as any).error.code).toBe('TW_ERR_HTTP_BODY');
  });

  it('feed clients beyond the cap are refused; oversized and malformed client messages are refused and counted', async () => {
    const url = s.base.replace('http', 'ws') + '/api/feed';
    const open = await Promise.all([1, 2, 3].map(() => new Promise<WebSocket>((r) => { const w = new WebSocket(url); w.once('open', () => r(w)); })));
    try {
      const fourth = new WebSocket(url);
      const refused = await new Promise<number>((r) => fourth.once('unexpected-response', (_req, res) => r(res.statusCode ?? 0)));
      expect(refused).toBe(503);
      const [a, b] = open;
      const reply = new Promise<any>((r) => a!.on('message', (d) => { const m = JSON.parse(d.toString()); if (m.type === 'error') r(m); }));
      a!.send('{not json');
      expect(await reply).toMatchObject({ type: 'error', code: 'TW_ERR_HTTP_BODY' });
      const closed = new Promise<number>((r) => b!.once('close', (code) => r(code)));
      b!.send(JSON.stringify({ type: 'ping', pad: 'x'.repeat(1000) }));
      expect(await closed).toBe(1009); // RFC 6455 7.4.1: message too big
      await until(async () => (await (await s.get('/metrics')).text()).includes('tapwarden_feed_refused_messages_total{why="size"} 1'), 5000, 'the size refusal counted');
      expect(await s.metric('tapwarden_feed_refused_connections_total')).toBeGreaterThanOrEqual(1);
    } finally {
      for (const w of open) w.terminate();
    }
  });

  it('control: refused with a wrong or missing token, applied with the right one, with or without a body', async () => {
    const post = (path: string, body: string | undefined, token?: string, type = 'application/json') =>
      s.get(path, { method: 'POST', headers: { ...(body === undefined ? {} : { 'content-type': type }), ...(token ? { authorization: `Bearer ${token}` } : {}) }, body });
    const none = await post('/api/control/handoffs', '{"frozen": true}');
    expect(none.status).toBe(401);
    expect(((await none.json()) as any).error.code).toBe('TW_ERR_AUTH_TOKEN');
    expect((await post('/api/control/handoffs', '{"frozen": true}', 'wrong-token-wrong-token')).status).toBe(401);
    const ok = await post('/api/control/handoffs', '{"frozen": true}', TOKEN);
    expect(ok.status).toBe(200);
    expect(((await ok.json()) as any).handoffsHeld).toBe(true);
    expect(await s.metric('tapwarden_handoffs_enabled{channel="1"}')).toBe(0);
    const before = await s.metric('tapwarden_clean_weights_version{channel="1"}');
    // README: the body of handoff, rollback and reset is {} or none; an empty JSON body is none.
    expect((await post('/api/control/handoff', undefined, TOKEN)).status).toBe(200);
    expect((await post('/api/control/handoff', '', TOKEN)).status).toBe(200);
    expect((await post('/api/control/handoff', '{}', TOKEN)).status).toBe(200);
    await until(async () => (await s.metric('tapwarden_clean_weights_version{channel="1"}')) === before + 3, 5000, 'three forced handoffs');
    expect((await post('/api/control/handoffs', '{"frozen": false}', TOKEN)).status).toBe(200);
    const bad = await post('/api/control/adaptation', '{"frozen": "yes"}', TOKEN);
    expect(bad.status).toBe(400);
    expect(((await bad.json()) as any).error.message).toMatch(/frozen must be boolean/);
  });

  it('bad requests get a clear 4xx with the documented body, and the service keeps running', async () => {
    const auth = { authorization: `Bearer ${TOKEN}` };
    const malformed = await s.get('/api/control/handoffs', { method: 'POST', headers: { 'content-type': 'application/json', ...auth }, body: '{"frozen": tru' });
    expect(malformed.status).toBe(400);
    expect(((await malformed.json()) as any).error.code).toBe('TW_ERR_HTTP_BODY');
    const unknown = await s.get('/api/nothing-here');
    expect(unknown.status).toBe(404);
    expect(await unknown.json()).toEqual({ error: { code: 'TW_ERR_HTTP_NOT_FOUND', message: 'no route GET /api/nothing-here' } });
    const wrongMethod = await s.get('/metrics', { method: 'DELETE' });
    expect(wrongMethod.status).toBe(404);
    expect(((await wrongMethod.json()) as any).error.code).toBe('TW_ERR_HTTP_NOT_FOUND');
    // 413: a body over 16 KiB; 415: a body that is not JSON.
    const big = await s.get('/api/control/handoffs', { method: 'POST', headers: { 'content-type': 'application/json', ...auth }, body: JSON.stringify({ frozen: true, pad: 'x'.repeat(20_000) }) });
    expect(big.status).toBe(413);
    expect(((await big.json()) as any).error.code).toBe('TW_ERR_HTTP_BODY');
    const text = await s.get('/api/control/handoff', { method: 'POST', headers: { 'content-type': 'text/plain', ...auth }, body: 'go' });
    expect(text.status).toBe(415);
    expect(((await text.json()) as any).error.code).toBe('TW_ERR_HTTP_BODY');
    // A method Node's parser does not know never reaches fastify: still the documented body.
    const raw = await new Promise<string>((resolve) => {
      const sock = connect(Number(new URL(s.base).port), '127.0.0.1', () => sock.write('BREW /metrics HTTP/1.1\r\nHost: x\r\n\r\n'));
      let got = '';
      sock.on('data', (d) => (got += d));
      sock.on('close', () => resolve(got));
    });
    expect(raw).toMatch(/^HTTP\/1\.1 400 Bad Request/);
    expect(JSON.parse(raw.split('\r\n\r\n')[1]!)).toMatchObject({ error: { code: 'TW_ERR_HTTP_BAD_REQUEST' } });
    expect((await s.get('/healthz')).status).toBe(200);
    expect(s.proc.exitCode).toBe(null);
  });

  it('stdout holds JSON lines only', () => {
    expect(s.notJson).toEqual([]);
  });
});

describe('counts, not clocks: a stream processed exactly', () => {
  afterEach(stopAll);

  it('every frame fed is processed once, with no overrun, and the feed sends one status message per engine tick', async () => {
    const dir = tmpDir();
    const { file, frames } = recording(dir, 3);
    const s = await serveWith(dir, `stream:\n  file: ${file}\n  loop: false\nfeed:\n  intervalSeconds: 0.25\n`);
    const ws = new WebSocket(s.base.replace('http', 'ws') + '/api/feed');
    const got: any[] = [];
    ws.on('message', (d) => got.push(JSON.parse(d.toString())));
    try {
      await new Promise((r) => ws.once('open', r));
      await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
      expect(await s.metric('tapwarden_samples_processed_total')).toBe(frames);
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      const status = got.filter((m) => m.type === 'status');
      expect(status.length).toBeGreaterThan(3);
      // Consecutive status messages are exactly one feed interval of stream apart.
      for (let i = 1; i < status.length; i++) expect(status[i].streamSeconds - status[i - 1].streamSeconds).toBeCloseTo(0.25, 9);
      // And every window's decision record reached the client, in order.
      const decisions = got.filter((m) => m.type === 'decision');
      expect(decisions.length).toBeGreaterThan(0);
      for (let i = 1; i < decisions.length; i++) expect(decisions[i].window).toBe(decisions[i - 1].window + 1);
      expect(decisions.at(-1).window).toBe(Math.floor(frames / 8000) - 1);
    } finally {
      ws.terminate();
      await s.stop();
    }
  });

  it('a client that never reads costs no input and holds up no other client', async () => {
    const dir = tmpDir();
    const { file, frames } = recording(dir, 4);
    const s = await serveWith(dir, `stream:\n  file: ${file}\n  loop: false\nfeed:\n  intervalSeconds: 0.01\n  clientBufferBytes: 4096\n`);
    const url = s.base.replace('http', 'ws') + '/api/feed';
    const stalled = new WebSocket(url);
    const reader = new WebSocket(url);
    let status = 0;
    reader.on('message', (d) => JSON.parse(d.toString()).type === 'status' && status++);
    try {
      await Promise.all([stalled, reader].map((w) => new Promise((r) => w.once('open', r))));
      (stalled as any)._socket.pause(); // stop reading from the socket
      await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
      expect(await s.metric('tapwarden_samples_processed_total')).toBe(frames);
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      // The reader got a status message for (nearly) every 10 ms of the stream it was connected for.
      expect(status).toBeGreaterThan(300);
    } finally {
      stalled.terminate();
      reader.terminate();
      await s.stop();
    }
  });
});

describe('tapwarden serve without a control token, and bad starts', () => {
  afterEach(stopAll);

  it('refuses control and keeps the read-only routes open', async () => {
    const s = await serveWith(tmpDir(), '');
    const r = await s.get('/api/control/handoff', { method: 'POST', headers: { authorization: 'Bearer anything-at-all-123' } });
    expect(r.status).toBe(403);
    expect(((await r.json()) as any).error.code).toBe('TW_ERR_AUTH_NOT_CONFIGURED');
    expect((await s.get('/api/status')).status).toBe(200);
  });

  it('a control token shorter than 16 characters is refused, from the environment as from a file', () => {
    const dir = tmpDir();
    writeFileSync(join(dir, 'c.yaml'), 'http:\n  port: 0\n');
    const r = cli(['serve', '--config', join(dir, 'c.yaml')], { env: { TAPWARDEN_CONTROL_TOKEN: 'short-token' }, timeoutMs: 20_000 });
    expect(r.status).toBe(2);
    expect(r.stderr.trim()).toMatch(/^tapwarden: config .*: TAPWARDEN_CONTROL_TOKEN holds a token of 11 characters; allowed: at least 16 .*\[TW_ERR_CONFIG_VALUE\]$/);
    writeFileSync(join(dir, 'token'), 'tiny\n');
    writeFileSync(join(dir, 'f.yaml'), `http:\n  port: 0\ncontrol:\n  tokenFile: ${join(dir, 'token')}\n`);
    const f = cli(['serve', '--config', join(dir, 'f.yaml')], { env: { TAPWARDEN_CONTROL_TOKEN: '' }, timeoutMs: 20_000 });
    expect(f.status).toBe(2);
    expect(f.stderr).toMatch(/control\.tokenFile .* holds a token of 4 characters; allowed: at least 16/);
  });

  it('a port already in use: one line, exit 6, and the process ends', async () => {
    const first = await serveWith(tmpDir(), '');
    const dir = tmpDir();
    writeFileSync(`${dir}/same-port.yaml`, `http:\n  port: ${new URL(first.base).port}\n`);
    const r = cli(['serve', '--config', `${dir}/same-port.yaml`], { timeoutMs: 20_000 });
    expect(r.status).toBe(6);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/^tapwarden: cannot listen on 127\.0\.0\.1:\d+: listen EADDRINUSE.*\[TW_ERR_HTTP_LISTEN\]$/m);
  });

  it('a bad config: one line, non-zero exit', () => {
    const dir = tmpDir();
    const f = `${dir}/bad.yaml`;
    writeFileSync(f, 'http:\n  port: 99999\n');
    const r = cli(['serve', '--config', f]);
    expect(r.status).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/http.port = 99999 is not allowed; allowed: <= 65535/);
  });
});
