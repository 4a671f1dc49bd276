import { existsSync, readdirSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connect } from 'node:net';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { loadConfig } from '../../src/config/load.js';
import { cachedDemo } from '../../src/demo/write.js';
import { readSnapshot } from '../../src/service/persistence.js';
import { Telemetry } from '../../src/service/telemetry.js';
import { expectGolden } from '../helpers/golden.js';
import { serveWith, stopAll, until } from '../helpers/serve.js';
import { tmpDir } from '../helpers/tools.js';

// The service's life as a rig sees it: a file that ends, an engine that dies, an operator
// reset, a restart, a flood of clients, the temporary directory after a hundred starts.

const TOKEN = 'bench-7-control-token-0123456789';
const auth = { authorization: `Bearer ${TOKEN}`, 'content-type': 'application/json' };

afterEach(stopAll);

describe('serve lifecycle', () => {
  it('loop: false, SIGTERM after the file ended: exit 0 and the weights saved', async () => {
    const dir = tmpDir();
    const file = join(dir, 'weights.json');
    const s = await serveWith(dir, `stream:\n  pace: free\n  loop: false\npersistence:\n  file: ${file}\n  minIntervalSeconds: 3600\n`);
    await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
    const version = await s.metric('tapwarden_clean_weights_version{channel="1"}');
    expect(await s.stop()).toBe(0);
    expect(s.stderr.filter((l) => /EBADF|at /.test(l))).toEqual([]);
    const saved = readSnapshot(file);
    if ('problem' in saved) throw new Error(saved.problem);
    expect(saved.snapshot.cleanVersion).toBe(version);
  });

  it('the engine worker dies: requests fail fast with a coded 503, readiness drops, the weights are saved and the process exits 7', async () => {
    const dir = tmpDir();
    const file = join(dir, 'weights.json');
    // TAPWARDEN_FAULT ends the engine thread after this many blocks (DEVELOPERS.md, fault injection).
    const s = await serveWith(dir, `persistence:\n  file: ${file}\n  minIntervalSeconds: 3600\n`, { TAPWARDEN_FAULT: 'engine-exit:400', TAPWARDEN_CONTROL_TOKEN: TOKEN });
    await s.logged((l) => l['code'] === 'TW_ERR_ENGINE_FAILED').catch(() => undefined);
    const code = await s.exited;
    expect(code).toBe(7);
    expect(s.stderr.join('\n')).toMatch(/the engine failed; the last clean weights were saved \[TW_ERR_ENGINE_FAILED\]/);
    const saved = readSnapshot(file);
    if ('problem' in saved) throw new Error(saved.problem);
    expect(saved.snapshot.cleanVersion).toBeGreaterThan(0);
  });

  it('once the engine is gone, a request is refused at once with TW_ERR_ENGINE_FAILED, not left waiting', async () => {
    // The engine host on its own: the built one, whose worker is dist/service/worker.js.
    const built: string = '../../dist/service/engineHost.js';
    const { EngineHost } = (await import(built)) as typeof import('../../src/service/engineHost.js');
    const config = loadConfig(undefined, { stream: { pace: 'free' } });
    process.env['TAPWARDEN_FAULT'] = 'engine-exit:10';
    let failed = '';
    const host = new EngineHost(config, cachedDemo(), 16000, new Telemetry(), [], {
      tick() {},
      state() {},
      warning() {},
      ended() {},
      episode() {},
      failed: (m: string) => (failed = m),
    });
    try {
      host.start();
      await until(() => failed !== '', 10_000, 'the engine to fail');
      expect(failed).toMatch(/the engine worker exited with code 70/);
      await expect(host.weights()).rejects.toMatchObject({ code: 'TW_ERR_ENGINE_FAILED' });
      await expect(host.control({ kind: 'handoff' })).rejects.toMatchObject({ code: 'TW_ERR_ENGINE_FAILED', httpStatus: 503 });
    } finally {
      delete process.env['TAPWARDEN_FAULT'];
      await host.close();
    }
  });

  it('an operator reset is a new clean version: announced, counted, saved, and what a restart restores', async () => {
    const dir = tmpDir();
    const file = join(dir, 'weights.json');
    const yaml = `persistence:\n  file: ${file}\n  minIntervalSeconds: 0\nsupervisor:\n  passesRequired: 2\n`;
    const s1 = await serveWith(dir, yaml, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    await until(async () => (await s1.metric('tapwarden_clean_weights_version{channel="1"}')) >= 2, 30_000, 'two handoffs');
    const ws = new WebSocket(s1.base.replace('http', 'ws') + '/api/feed');
    const events: any[] = [];
    ws.on('message', (d) => {
      const m = JSON.parse(d.toString());
      if (m.type === 'handoff') events.push(m);
    });
    try {
      await new Promise((r) => ws.once('open', r));
      // Hold handoffs so that nothing follows the reset before the restart.
      expect((await s1.get('/api/control/handoffs', { method: 'POST', headers: auth, body: '{"frozen": true}' })).status).toBe(200);
      const reset = (await (await s1.get('/api/control/reset', { method: 'POST', headers: auth, body: '{}' })).json()) as any;
      await until(() => events.some((e) => e.reason === 'reset'), 5000, 'the reset announced on the feed');
      expect(await s1.metric('tapwarden_clean_weights_version{channel="1"}')).toBe(reset.cleanVersion);
      expect(await s1.metric('tapwarden_resets_total{channel="1"}')).toBe(1);
      const status = (await (await s1.get('/api/status')).json()) as any;
      expect(status.lastHandoff).toMatchObject({ reason: 'reset', version: reset.cleanVersion });
      await until(() => {
        const r = readSnapshot(file);
        return !('problem' in r) && r.snapshot.cleanVersion === reset.cleanVersion;
      }, 5000, 'the reset saved');
    } finally {
      ws.terminate();
    }
    expect(await s1.stop()).toBe(0);
    const saved = readSnapshot(file);
    if ('problem' in saved) throw new Error(saved.problem);
    expect(saved.snapshot.weights.every((w) => w === 0)).toBe(true);
    // A restart restores the weights from after the reset (zeros), not from before it.
    const s2 = await serveWith(dir, `${yaml.replace('passesRequired: 2', 'passesRequired: 100000')}`);
    const w = (await (await s2.get('/api/weights?path=clean')).json()) as { weights: number[] };
    expect(w.weights.every((v) => v === 0)).toBe(true);
  });

  it('a hundred starts on the demo leave one cached copy of it in the temporary directory, not a hundred', async () => {
    const before = new Set(readdirSync(tmpdir()));
    for (let i = 0; i < 3; i++) {
      const s = await serveWith(tmpDir(), 'stream:\n  pace: free\n  loop: false\n');
      await s.stop();
    }
    const added = readdirSync(tmpdir()).filter((f) => !before.has(f) && /^tapwarden-(serve|demo)/.test(f));
    expect(added).toEqual([]);
    const cache = readdirSync(tmpdir()).filter((f) => f.startsWith('tapwarden-demo-'));
    expect(cache.length).toBeGreaterThanOrEqual(1);
    for (const c of cache) expect(statSync(join(tmpdir(), c)).isDirectory()).toBe(true);
  });
});

describe('HTTP and feed load do not touch the input', () => {
  it('48 kHz stereo: 20,000 pings from one feed client, 100 pipelined GET /metrics and a 2 s main-thread stall, and not a block dropped', async () => {
    const dir = tmpDir();
    const { execFileSync } = await import('node:child_process');
    const wav = join(dir, 'stream48k.wav');
    execFileSync('sox', ['-n', '-r', '48000', '-c', '2', '-b', '16', wav, 'synth', '6', 'pinknoise', 'pinknoise', 'vol', '0.3']);
    // The pacer and the engine share the worker thread, so no main-thread work reaches them: the
    // main thread also stalls for 2 s (TAPWARDEN_FAULT, DEVELOPERS.md), twice what the queue
    // holds. The queue (192 blocks, 1 s) absorbs what the OS scheduler does to a worker on a
    // 2-core machine that runs other test files at the same time.
    const s = await serveWith(dir, `stream:\n  file: ${wav}\n  loop: false\n  blockFrames: 256\n  queueBlocks: 192\nfilter:\n  taps: 256\n`, { TAPWARDEN_FAULT: 'main-stall:2000' });
    const ws = new WebSocket(s.base.replace('http', 'ws') + '/api/feed');
    await new Promise((r) => ws.once('open', r));
    const ping = JSON.stringify({ type: 'ping' });
    for (let i = 0; i < 20_000; i++) ws.send(ping);
    const pipelined = await new Promise<string>((resolve) => {
      const sock = connect(Number(new URL(s.base).port), '127.0.0.1', () => {
        sock.write('GET /metrics HTTP/1.1\r\nHost: x\r\n\r\n'.repeat(99) + 'GET /metrics HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n');
      });
      let got = '';
      sock.on('data', (d) => (got += d));
      sock.on('close', () => resolve(got));
    });
    expect(pipelined.match(/HTTP\/1\.1 200 OK/g)).toHaveLength(100);
    try {
      await s.logged((l) => String(l['msg']).startsWith('the stream ended'), 60_000);
      expect(await s.metric('tapwarden_samples_processed_total')).toBe(6 * 48000);
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      // The flood was refused past the rate limit, and counted.
      expect(await s.metric('tapwarden_feed_refused_messages_total{why="rate"}')).toBeGreaterThan(10_000);
    } finally {
      ws.terminate();
    }
  });
});

describe('golden /metrics', () => {
  it('a deterministic run (the demo, free-running, no loop), read after the stream ended', async () => {
    const s = await serveWith(tmpDir(), 'stream:\n  pace: free\n  loop: false\n');
    await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
    const text = await (await s.get('/metrics')).text();
    // Left out: what depends on the machine or the clock (process and runtime metrics, engine
    // time per block, the age of the last handoff) and on clients (the feed).
    const timeBound = /^(# (HELP|TYPE) )?(process_|nodejs_|tapwarden_block_processing_seconds|tapwarden_last_handoff_age_seconds|tapwarden_feed_)/;
    const kept = text.split('\n').filter((l) => l !== '' && !timeBound.test(l));
    expectGolden('serve-demo.metrics', kept.join('\n') + '\n');
    expect(existsSync(join(tmpdir(), 'tapwarden-demo-0.1.0'))).toBe(true);
  });
});
