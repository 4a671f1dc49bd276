import { existsSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import WebSocket from 'ws';
import { serveWith, stopAll, until } from '../helpers/serve.js';
import { cli, sox, tmpDir } from '../helpers/tools.js';

// serve with the demo's two measurement channels (input.desiredChannels [1, 2]), on the demo's
// two references in the first test (rig.yaml), driven by real HTTP and WebSocket clients. Every
// check is a count or a reply, none a time.

const TOKEN = 'bench-7-control-token-0123456789';

describe('serve with several measurement channels', () => {
  afterEach(stopAll);

  it('runs each channel as replay does, labels the metrics, routes control by channel, saves a snapshot per channel', async () => {
    const dir = tmpDir();
    cli(['demo', '--out', dir]);
    const rec = join(dir, 'bench-trial.wav');
    const weights = join(dir, 'weights.json');
    const s = await serveWith(
      dir,
      `input:\n  referenceChannels: [0, 3]\n  desiredChannels: [1, 2]\nstream:\n  file: ${rec}\n  pace: free\n  loop: false\npersistence:\n  file: ${weights}\n  minIntervalSeconds: 0\n`,
      { TAPWARDEN_CONTROL_TOKEN: TOKEN },
    );
    try {
      await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
      // The same run offline (replay writes DIR/ch1 and DIR/ch2).
      const r = cli(['replay', rec, '--config', join(dir, 'rig.yaml'), '--out', join(dir, 'replay')]);
      expect(r.status, r.stderr).toBe(0);
      for (const ch of [1, 2]) {
        const summary = JSON.parse(readFileSync(join(dir, 'replay', `ch${ch}`, 'summary.json'), 'utf8'));
        expect(await s.metric(`tapwarden_handoffs_accepted_total{channel="${ch}",reason="supervisor"}`)).toBe(summary.handoffs.accepted);
        expect(await s.metric(`tapwarden_clean_weights_version{channel="${ch}"}`)).toBe(summary.weights.cleanVersion);
        const w = (await (await s.get(`/api/weights?path=adaptive&channel=${ch}`)).json()) as { weights: number[] };
        expect(w.weights).toEqual(summary.weights.adaptive);
      }
      const status = (await (await s.get('/api/status')).json()) as { channels: { channel: number; lastWindow: { channel: number } }[] };
      expect(status.channels.map((c) => [c.channel, c.lastWindow.channel])).toEqual([
        [1, 1],
        [2, 2],
      ]);

      const post = (path: string, body: string) => s.get(path, { method: 'POST', headers: { 'content-type': 'application/json', authorization: `Bearer ${TOKEN}` }, body });
      const v1 = await s.metric('tapwarden_clean_weights_version{channel="1"}');
      const v2 = await s.metric('tapwarden_clean_weights_version{channel="2"}');
      // One channel's handoff moves that channel only; without a channel, every one.
      const one = (await (await post('/api/control/handoff', '{"channel": 2}')).json()) as { channel: number; channels: { channel: number }[] };
      expect(one.channels.map((c) => c.channel)).toEqual([2]);
      await until(async () => (await s.metric('tapwarden_clean_weights_version{channel="2"}')) === v2 + 1, 5000, 'channel 2 handed over');
      expect(await s.metric('tapwarden_clean_weights_version{channel="1"}')).toBe(v1);
      const all = (await (await post('/api/control/adaptation', '{"frozen": true}')).json()) as { channels: { channel: number; adapting: boolean }[] };
      expect(all.channels).toMatchObject([
        { channel: 1, adapting: false },
        { channel: 2, adapting: false },
      ]);
      expect(await s.metric('tapwarden_adaptation_enabled{channel="2"}')).toBe(0);
      const bad = await post('/api/control/rollback', '{"channel": 5}');
      expect(bad.status).toBe(400);
      expect(((await bad.json()) as { error: { code: string; message: string } }).error).toEqual({
        code: 'TW_ERR_HTTP_BODY',
        message: 'bad request: channel 5 is not a measurement channel; allowed: 1, 2 (or no channel: every one)',
      });
      expect((await s.get('/api/weights?path=clean&channel=5')).status).toBe(400);
    } finally {
      await s.stop();
    }
    // One snapshot per channel, each holding that channel's clean weights: two references' 64 taps.
    for (const ch of [1, 2]) {
      const file = join(dir, `weights.ch${ch}.json`);
      expect(existsSync(file)).toBe(true);
      const snap = JSON.parse(readFileSync(file, 'utf8')) as { weights: number[] };
      expect(snap.weights.length).toBe(128);
    }
    expect(existsSync(weights)).toBe(false);
  });

  it('tags every feed message with its channel: each window brings one decision per channel', async () => {
    const dir = tmpDir();
    cli(['demo', '--out', dir]);
    // Paced at its rate and looped: SoX trims the demo to its first 3 s.
    const short = join(dir, 'short.wav');
    sox(join(dir, 'bench-trial.wav'), short, 'trim', '0', '3');
    const s = await serveWith(dir, `input:\n  desiredChannels: [2, 1]\nsupervisor:\n  windowSeconds: 0.1\nstream:\n  file: ${short}\n`);
    const ws = new WebSocket(s.base.replace('http', 'ws') + '/api/feed');
    const windows = new Map<number, number[]>();
    let statusChannels: number[] = [];
    ws.on('message', (d) => {
      const m = JSON.parse(d.toString()) as { type: string; channel: number; window: number; channels?: { channel: number }[] };
      if (m.type === 'decision') windows.set(m.window, [...(windows.get(m.window) ?? []), m.channel]);
      if (m.type === 'status') statusChannels = m.channels!.map((c) => c.channel);
    });
    try {
      await until(() => windows.size >= 6, 20_000, 'six windows on the feed');
      // The first window seen may have been half over when the client connected.
      const whole = [...windows.entries()].slice(1, -1);
      for (const [, chs] of whole) expect(chs).toEqual([2, 1]);
      expect(statusChannels).toEqual([2, 1]);
    } finally {
      ws.terminate();
      await s.stop();
    }
  });
});
