import { writeFileSync } from 'node:fs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { cli, tmpDir } from '../helpers/tools.js';
import { serveWith, sleep, until, type Served } from '../helpers/serve.js';

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

describe('tapwarden serve: HTTP and WebSocket, driven by real clients on loopback', () => {
  const dir = tmpDir();
  let s: Served;
  beforeAll(async () => {
    s = await serveWith(dir, 'feed:\n  intervalSeconds: 0.1\n  maxClients: 3\n  maxMessageBytes: 256\n', { TAPWARDEN_CONTROL_TOKEN: TOKEN });
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
      tapwarden_queue_overruns_total: 'counter',
      tapwarden_queue_underruns_total: 'counter',
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

  it('labels per-path figures path="adaptive"|"clean" and rejections by criterion', async () => {
    await until(async () => (await s.metric('tapwarden_handoffs_accepted_total')) > 0, 20_000, 'a handoff');
    const text = await (await s.get('/metrics')).text();
    for (const p of ['adaptive', 'clean']) expect(text).toMatch(new RegExp(`^tapwarden_cancellation_db\\{path="${p}"\\} -?[\\d.]+`, 'm'));
    expect(text).toMatch(/^tapwarden_handoffs_rejected_total\{criterion="weightMean"\} \d+/m);
  });

  it('the samples counter advances at the stream rate (16 kHz demo, paced in real time)', async () => {
    const a = await s.metric('tapwarden_samples_processed_total');
    const t0 = performance.now();
    await sleep(3000);
    const b = await s.metric('tapwarden_samples_processed_total');
    const rate = (b - a) / ((performance.now() - t0) / 1000);
    expect(rate).toBeGreaterThan(16000 * 0.9);
    expect(rate).toBeLessThan(16000 * 1.1);
  });

  it('healthz and readyz', async () => {
    expect(await (await s.get('/healthz')).json()).toEqual({ status: 'alive' });
    expect((await s.get('/readyz')).status).toBe(200);
  });

  it('status and weights', async () => {
    const st = (await (await s.get('/api/status')).json()) as Record<string, any>;
    expect(st['stream'].up).toBe(true);
    expect(st['filter'].taps).toBe(64);
    expect(st['recentDecisions'].length).toBeGreaterThan(0);
    const w = (await (await s.get('/api/weights?path=clean')).json()) as { weights: number[] };
    expect(w.weights).toHaveLength(64);
    const bad = await s.get('/api/weights?path=both');
    expect(bad.status).toBe(400);
    expect(((await bad.json()) as any).error.code).toBe('TW_ERR_HTTP_BODY');
  });

  it('the feed sends status messages at its interval and every decision as it happens', async () => {
    const ws = new WebSocket(s.base.replace('http', 'ws') + '/api/feed');
    const got: any[] = [];
    ws.on('message', (d) => got.push(JSON.parse(d.toString())));
    await new Promise((r) => ws.once('open', r));
    await sleep(2100);
    ws.close();
    const status = got.filter((m) => m.type === 'status');
    const decisions = got.filter((m) => m.type === 'decision');
    expect(status.length).toBeGreaterThanOrEqual(15);
    expect(status.length).toBeLessThanOrEqual(25);
    expect(status.at(-1).engine.samples).toBeGreaterThan(status[0].engine.samples);
    expect(decisions.length).toBeGreaterThanOrEqual(3); // one per 0.5 s window
    expect(decisions[0]).toMatchObject({ outcome: expect.any(String), failed: expect.any(Array), adaptive: { cancellationDb: expect.any(Number) } });
  });

  it('a client that never reads does not slow processing', async () => {
    const stalled = new WebSocket(s.base.replace('http', 'ws') + '/api/feed');
    await new Promise((r) => stalled.once('open', r));
    (stalled as any)._socket.pause(); // stop reading from the socket
    const a = await s.metric('tapwarden_samples_processed_total');
    const t0 = performance.now();
    await sleep(3000);
    const rate = ((await s.metric('tapwarden_samples_processed_total')) - a) / ((performance.now() - t0) / 1000);
    expect(rate).toBeGreaterThan(16000 * 0.9);
    expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
    stalled.terminate();
  });

  it('feed clients beyond the cap are refused; oversized and malformed client messages are refused', async () => {
    const url = s.base.replace('http', 'ws') + '/api/feed';
    const open = await Promise.all([1, 2, 3].map(() => new Promise<WebSocket>((r) => { const w = new WebSocket(url); w.once('open', () => r(w)); })));
    const fourth = new WebSocket(url);
    const refused = await new Promise<number>((r) => fourth.once('unexpected-response', (_req, res) => r(res.statusCode ?? 0)));
    expect(refused).toBe(503);
    const [a, b] = open;
    const reply = new Promise<any>((r) => a!.on('message', (d) => { const m = JSON.parse(d.toString()); if (m.type !== 'status' && m.type !== 'decision') r(m); }));
    a!.send('{not json');
    expect(await reply).toMatchObject({ type: 'error', code: 'TW_ERR_HTTP_BODY' });
    const closed = new Promise<number>((r) => b!.once('close', (code) => r(code)));
    b!.send(JSON.stringify({ type: 'ping', pad: 'x'.repeat(1000) }));
    expect(await closed).toBe(1009); // RFC 6455 7.4.1: message too big
    for (const w of open) w.terminate();
  });

  it('control: refused with a wrong or missing token, applied with the right one', async () => {
    const post = (path: string, body: unknown, token?: string) =>
      s.get(path, {
        method: 'POST',
        headers: { 'content-type': 'application/json', ...(token ? { authorization: `Bearer ${token}` } : {}) },
        body: JSON.stringify(body),
      });
    const none = await post('/api/control/handoffs', { frozen: true });
    expect(none.status).toBe(401);
    expect(((await none.json()) as any).error.code).toBe('TW_ERR_AUTH_TOKEN');
    expect((await post('/api/control/handoffs', { frozen: true }, 'wrong-token-wrong-token')).status).toBe(401);
    const ok = await post('/api/control/handoffs', { frozen: true }, TOKEN);
    expect(ok.status).toBe(200);
    expect(((await ok.json()) as any).handoffsHeld).toBe(true);
    expect(await s.metric('tapwarden_handoffs_enabled')).toBe(0);
    const before = await s.metric('tapwarden_clean_weights_version');
    expect((await post('/api/control/handoff', {}, TOKEN)).status).toBe(200);
    await until(async () => (await s.metric('tapwarden_clean_weights_version')) === before + 1, 5000, 'the forced handoff');
    expect((await post('/api/control/handoffs', { frozen: false }, TOKEN)).status).toBe(200);
    const bad = await post('/api/control/adaptation', { frozen: 'yes' }, TOKEN);
    expect(bad.status).toBe(400);
    expect(((await bad.json()) as any).error.message).toMatch(/frozen must be boolean/);
  });

  it('bad requests get a clear 4xx and the service keeps running', async () => {
    const malformed = await s.get('/api/control/handoffs', {
      method: 'POST',
      headers: { 'content-type': 'application/json', authorization: `Bearer ${TOKEN}` },
      body: '{"frozen": tru',
    });
    expect(malformed.status).toBe(400);
    expect(((await malformed.json()) as any).error.code).toBe('TW_ERR_HTTP_BODY');
    const unknown = await s.get('/api/nothing-here');
    expect(unknown.status).toBe(404);
    expect(await unknown.json()).toEqual({ error: { code: 'TW_ERR_HTTP_NOT_FOUND', message: 'no route GET /api/nothing-here' } });
    expect((await s.get('/healthz')).status).toBe(200);
    expect(s.proc.exitCode).toBe(null);
  });
});

describe('tapwarden serve without a control token', () => {
  it('refuses control and keeps the read-only routes open', async () => {
    const s = await serveWith(tmpDir(), '');
    try {
      const r = await s.get('/api/control/handoff', { method: 'POST', headers: { authorization: 'Bearer anything-at-all-123' } });
      expect(r.status).toBe(403);
      expect(((await r.json()) as any).error.code).toBe('TW_ERR_AUTH_NOT_CONFIGURED');
      expect((await s.get('/api/status')).status).toBe(200);
    } finally {
      await s.stop();
    }
  });

  it('a port already in use: one line, exit 6, and the process ends', async () => {
    const first = await serveWith(tmpDir(), '');
    try {
      const dir = tmpDir();
      writeFileSync(`${dir}/same-port.yaml`, `http:\n  port: ${new URL(first.base).port}\n`);
      const r = cli(['serve', '--config', `${dir}/same-port.yaml`], { timeoutMs: 20_000 });
      expect(r.status).toBe(6);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(/^tapwarden: cannot listen on 127\.0\.0\.1:\d+: listen EADDRINUSE.*\[TW_ERR_HTTP_LISTEN\]$/m);
    } finally {
      await first.stop();
    }
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
