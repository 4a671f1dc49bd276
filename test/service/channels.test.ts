import { existsSync, readFileSync, writeFileSync } from 'node:fs';
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

  it('spread over two engine threads (stream.workers 2), each channel runs as replay does', async () => {
    const dir = tmpDir();
    cli(['demo', '--out', dir]);
    const rec = join(dir, 'bench-trial.wav');
    const s = await serveWith(dir, `input:\n  referenceChannels: [0, 3]\n  desiredChannels: [1, 2]\nstream:\n  file: ${rec}\n  pace: free\n  loop: false\n  workers: 2\n`);
    try {
      await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
      // The second thread may still be working through its queue when the input ends.
      const progress = async () => ((await (await s.get('/api/status')).json()) as { channels: { samples: number }[] }).channels.map((c) => c.samples);
      await until(async () => (await progress()).every((n) => n === 640_000), 20_000, 'both threads through the recording');
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      const r = cli(['replay', rec, '--config', join(dir, 'rig.yaml'), '--out', join(dir, 'replay')]);
      expect(r.status, r.stderr).toBe(0);
      for (const ch of [1, 2]) {
        const summary = JSON.parse(readFileSync(join(dir, 'replay', `ch${ch}`, 'summary.json'), 'utf8'));
        const w = (await (await s.get(`/api/weights?path=clean&channel=${ch}`)).json()) as { weights: number[]; cleanVersion: number };
        expect(w.weights).toEqual(summary.weights.clean);
        expect(w.cleanVersion).toBe(summary.weights.cleanVersion);
        expect(await s.metric(`tapwarden_handoffs_accepted_total{channel="${ch}",reason="supervisor"}`)).toBe(summary.handoffs.accepted);
      }
    } finally {
      await s.stop();
    }
    // More threads than measurement channels is refused before anything starts.
    writeFileSync(join(dir, 'three.yaml'), 'input:\n  desiredChannels: [1, 2]\nstream:\n  workers: 3\n');
    const bad = cli(['serve', '--config', join(dir, 'three.yaml')]);
    expect(bad.status).toBe(2);
    expect(bad.stderr.trim()).toMatch(/stream\.workers = 3 is not allowed; allowed: 1 to 2 \(the measurement channels to spread over them\) \[TW_ERR_CONFIG_VALUE\]$/);
  });

  it('a group thread that falls behind loses only its own blocks, counted as overruns', async () => {
    const dir = tmpDir();
    cli(['demo', '--out', dir]);
    // Channel 2's thread stalls for 1.5 s at its first block; its queue holds 4 blocks of 256.
    const s = await serveWith(dir, `input:\n  desiredChannels: [1, 2]\nstream:\n  file: ${join(dir, 'bench-trial.wav')}\n  queueBlocks: 4\n  blockFrames: 256\n  workers: 2\n`, {
      TAPWARDEN_FAULT: 'group-stall:1500',
    });
    try {
      await until(async () => (await s.metric('tapwarden_queue_overruns_total')) > 0 && (await s.metric('tapwarden_stream_seconds')) > 3, 20_000, 'overruns counted');
      const status = async () => (await (await s.get('/api/status')).json()) as { engine: { samples: number; queue: { overruns: number } }; channels: { channel: number; samples: number }[] };
      // Read once the second thread has drained its queue: then every block is processed or counted.
      let st = await status();
      await until(async () => {
        st = await status();
        return st.engine.samples - st.channels[1]!.samples === st.engine.queue.overruns * 256 && st.channels[0]!.samples === st.engine.samples;
      }, 10_000, 'channel 2 behind by exactly its dropped blocks');
      expect(st.engine.queue.overruns).toBeGreaterThan(10);
    } finally {
      await s.stop();
    }
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
      await until(() => windows.size >= 6 && statusChannels.length > 0, 20_000, 'six windows and a status message on the feed');
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
