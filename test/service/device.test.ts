import { execFileSync } from 'node:child_process';
import { open, type FileHandle } from 'node:fs/promises';
import { readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { serveWith, sleep, stopAll, until } from '../helpers/serve.js';
import { bandLimited, through, white } from '../helpers/signals.js';
import { cli, tmpDir } from '../helpers/tools.js';

// A real PortAudio capture device with no sound hardware: ALSA's `file` PCM plugin reads the
// captured samples from `infile`. The infile is a FIFO that this test writes at the stream's
// rate, which paces the capture; HOME points ALSA at a .asoundrc in a temporary directory. The
// test holds the FIFO open read-write from the start, so that PortAudio's device probing (which
// opens the PCM, and so the FIFO) never waits for a writer.

const RATE = 16000;
const BLOCK = 256;
const FRAMES = 160 * BLOCK; // 2.56 s

describe('the live path through naudiodon (PortAudio) on an ALSA file device', () => {
  afterEach(stopAll);

  /** An ALSA file capture device `twbench` reading a FIFO, held open read-write (see the top). */
  async function captureDevice(dir: string): Promise<FileHandle> {
    const fifo = join(dir, 'capture.fifo');
    execFileSync('mkfifo', [fifo]);
    writeFileSync(join(dir, '.asoundrc'), `pcm.twbench {\n  type file\n  slave.pcm "null"\n  file "${join(dir, 'played.raw')}"\n  infile "${fifo}"\n  format "raw"\n}\n`);
    return open(fifo, 'r+');
  }

  const q = (v: number) => Math.max(-32768, Math.min(32767, Math.round(v * 32768)));

  /** The columns as 16-bit interleaved frames, and as a WAV of the same samples for the replay. */
  function interleave(columns: Float64Array[], wav: string): Buffer {
    const c = columns.length;
    const raw = Buffer.alloc(FRAMES * 2 * c);
    for (let i = 0; i < FRAMES; i++) for (let k = 0; k < c; k++) raw.writeInt16LE(q(columns[k]![i]!), (i * c + k) * 2);
    const w = new WavWriter(wav, RATE, c, 'pcm16');
    w.write(columns.map((col) => Float64Array.from(col, (v) => q(v) / 32768)), FRAMES);
    w.close();
    return raw;
  }

  /**
   * Whole ALSA periods at a time, paced at the stream's rate: the file plugin counts a short read
   * from its infile as a full period (the rest is silence), so a writer must not hand over a
   * partial one.
   */
  async function feed(fh: FileHandle, raw: Buffer, channels: number): Promise<void> {
    const chunk = 2048;
    for (let at = 0; at < FRAMES; at += chunk) {
      await fh.write(raw.subarray(at * 2 * channels, (at + chunk) * 2 * channels));
      await sleep((1000 * chunk) / RATE);
    }
  }

  it("processes exactly the captured samples, and ends where a replay of them ends", async () => {
    const dir = tmpDir();
    const x = bandLimited(FRAMES, 0.02, 0.3, 0.15, 201);
    const h = Array.from({ length: 16 }, (_, k) => 0.5 * 0.8 ** k * Math.cos(k));
    const d = through(h, x, white(FRAMES, 0.002, 202));
    const wav = join(dir, 'same.wav');
    const raw = interleave([x, d], wav);
    const config = `filter:\n  taps: 32\nsupervisor:\n  windowSeconds: 0.256\n`;
    writeFileSync(join(dir, 'replay.yaml'), config);

    const fh = await captureDevice(dir);
    const devices = cli(['devices', '--json'], { env: { HOME: dir } });
    expect(devices.status).toBe(0);
    expect(JSON.parse(devices.stdout).map((dv: { name: string }) => dv.name)).toContain('twbench');

    const s = await serveWith(
      dir,
      `${config}stream:\n  source: device\n  blockFrames: ${BLOCK}\n  device:\n    input: twbench\n    sampleRate: ${RATE}\n    channels: 2\n`,
      { HOME: dir },
    );
    try {
      await feed(fh, raw, 2);
      await until(async () => (await s.metric('tapwarden_samples_processed_total')) >= FRAMES, 20_000, 'all samples');
      await sleep(300);
      expect(await s.metric('tapwarden_samples_processed_total')).toBe(FRAMES);
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      const live = {
        adaptive: ((await (await s.get('/api/weights?path=adaptive')).json()) as { weights: number[] }).weights,
        clean: ((await (await s.get('/api/weights?path=clean')).json()) as { weights: number[] }).weights,
        accepted: await s.metric('tapwarden_handoffs_accepted_total{channel="1",reason="supervisor"}'),
      };
      const r = cli(['replay', wav, '--config', join(dir, 'replay.yaml'), '--out', join(dir, 'replay')]);
      expect(r.status).toBe(0);
      const summary = JSON.parse(readFileSync(join(dir, 'replay', 'summary.json'), 'utf8'));
      expect(live.adaptive).toEqual(summary.weights.adaptive);
      expect(live.clean).toEqual(summary.weights.clean);
      expect(live.accepted).toBe(summary.handoffs.accepted);
      expect(live.accepted).toBeGreaterThan(0);
      // PortAudio's own status lines went to stderr (the capture runs in a child process whose
      // stdout is the service's stderr): stdout stayed JSON lines.
      expect(s.notJson).toEqual([]);
    } finally {
      // Close the FIFO first: a capture blocked reading an empty FIFO would hold up the exit.
      await fh.close();
      await s.stop();
    }
  });

  it('a four-channel device with two measurement channels: each channel live is its replay', async () => {
    const dir = tmpDir();
    const x = bandLimited(FRAMES, 0.02, 0.3, 0.15, 211);
    const a = through(Array.from({ length: 12 }, (_, k) => 0.6 * 0.7 ** k), x, white(FRAMES, 0.002, 212));
    const b = through(Array.from({ length: 20 }, (_, k) => 0.4 * 0.85 ** k * Math.sin(k + 1)), x, white(FRAMES, 0.002, 213));
    // Channel 2 is a sensor this rig does not clean; the measurement channels come in reverse order.
    const wav = join(dir, 'four.wav');
    const raw = interleave([x, a, white(FRAMES, 0.1, 214), b], wav);
    const config = `input:\n  desiredChannels: [3, 1]\nfilter:\n  taps: 32\nsupervisor:\n  windowSeconds: 0.256\n`;
    writeFileSync(join(dir, 'replay.yaml'), config);
    const fh = await captureDevice(dir);
    const s = await serveWith(
      dir,
      `${config}stream:\n  source: device\n  blockFrames: ${BLOCK}\n  device:\n    input: twbench\n    sampleRate: ${RATE}\n    channels: 4\n`,
      { HOME: dir },
    );
    try {
      await feed(fh, raw, 4);
      await until(async () => (await s.metric('tapwarden_samples_processed_total')) >= FRAMES, 20_000, 'all samples');
      await sleep(300);
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      const r = cli(['replay', wav, '--config', join(dir, 'replay.yaml'), '--out', join(dir, 'replay')]);
      expect(r.status, r.stderr).toBe(0);
      for (const ch of [3, 1]) {
        const summary = JSON.parse(readFileSync(join(dir, 'replay', `ch${ch}`, 'summary.json'), 'utf8'));
        const weights = (await (await s.get(`/api/weights?path=clean&channel=${ch}`)).json()) as { channel: number; weights: number[] };
        expect(weights.channel).toBe(ch);
        expect(weights.weights).toEqual(summary.weights.clean);
        expect(await s.metric(`tapwarden_handoffs_accepted_total{channel="${ch}",reason="supervisor"}`)).toBe(summary.handoffs.accepted);
      }
      const status = (await (await s.get('/api/status')).json()) as { channels: { channel: number }[] };
      expect(status.channels.map((c) => c.channel)).toEqual([3, 1]);
    } finally {
      await fh.close();
      await s.stop();
    }
  });

  it('plays the clean output on a device, hard-limited to playbackPeakDb (the safety clamp)', async () => {
    const dir = tmpDir();
    const fifo = join(dir, 'capture.fifo');
    const played = join(dir, 'played.raw');
    execFileSync('mkfifo', [fifo]);
    writeFileSync(
      join(dir, '.asoundrc'),
      `pcm.twbench {\n  type file\n  slave.pcm "null"\n  file "${join(dir, 'unused.raw')}"\n  infile "${fifo}"\n  format "raw"\n}\n` +
        `pcm.twspeaker {\n  type file\n  slave.pcm "null"\n  file "${played}"\n  format "raw"\n}\n`,
    );
    // A loud measurement with nothing the reference can cancel: the clean output stays loud.
    const raw = Buffer.alloc(FRAMES * 4);
    for (let i = 0; i < FRAMES; i++) {
      raw.writeInt16LE(Math.round(3000 * Math.sin(i * 0.31)), i * 4);
      raw.writeInt16LE(Math.round(24000 * Math.sin(i * 0.017)), i * 4 + 2);
    }
    const fh: FileHandle = await open(fifo, 'r+');
    let dropped = 0;
    const s = await serveWith(
      dir,
      `stream:\n  source: device\n  blockFrames: ${BLOCK}\n  device:\n    input: twbench\n    playback: twspeaker\n    playbackPeakDb: -20\n    sampleRate: ${RATE}\n    channels: 2\n`,
      { HOME: dir },
    );
    try {
      for (let at = 0; at < FRAMES; at += 2048) {
        await fh.write(raw.subarray(at * 4, (at + 2048) * 4));
        await sleep((1000 * 2048) / RATE);
      }
      await until(async () => (await s.metric('tapwarden_samples_processed_total')) >= FRAMES, 20_000, 'all samples');
      // Let the playback child drain before the stop: wait until the played file has stopped
      // growing for 2 s (ALSA writes it a period at a time, and a period may be longer than one
      // look; a loaded machine delays it too), or holds every frame.
      let last = -1;
      for (let i = 0, still = 0; i < 150 && still < 10 && last < 2 * FRAMES; i++) {
        await sleep(200);
        const size = statSync(played, { throwIfNoEntry: false })?.size ?? -1;
        still = size === last && size > 0 ? still + 1 : 0;
        last = size;
      }
      dropped = await s.metric('tapwarden_playback_dropped_blocks_total');
    } finally {
      await fh.close();
      await s.stop();
    }
    const out = readFileSync(played);
    let peak = 0;
    for (let i = 0; i + 1 < out.length; i += 2) peak = Math.max(peak, Math.abs(out.readInt16LE(i)));
    const limit = 32767 * 10 ** (-20 / 20);
    // Every block of clean output was played or counted as dropped (the playback queue is capped
    // at 8 blocks, and the capture arrives 8 blocks at a time): nothing went missing uncounted.
    expect(out.length / 2 + dropped * BLOCK).toBeGreaterThanOrEqual(0.9 * FRAMES);
    expect(out.length / 2).toBeGreaterThan(FRAMES / 4);
    expect(peak).toBeLessThanOrEqual(Math.ceil(limit));
    expect(peak).toBeGreaterThan(0.95 * limit); // without the clamp it would reach 24000
  });

  it('a device that is not there is reported and retried; the service keeps running', async () => {
    const dir = tmpDir();
    writeFileSync(join(dir, '.asoundrc'), '');
    const s = await serveWith(dir, `stream:\n  source: device\n  device:\n    input: no-such-card\n    retrySeconds: 0.5\n`, { HOME: dir });
    try {
      await sleep(1500);
      const downs = s.logs.filter((l) => String(l['msg']).startsWith('stream down: audio device "no-such-card": not found'));
      expect(downs.length).toBeGreaterThanOrEqual(2); // the first attempt and at least one retry
      const ready = await s.get('/readyz');
      expect(ready.status).toBe(503);
      expect(((await ready.json()) as any).error.code).toBe('TW_ERR_NOT_READY');
      expect(await s.metric('tapwarden_stream_up')).toBe(0);
      expect((await s.get('/healthz')).status).toBe(200);
    } finally {
      await s.stop();
    }
  });
});

describe('a playback device that stops taking data', () => {
  afterEach(stopAll);

  it('caps the queue toward it, counts the blocks it drops, and loses no input', async () => {
    const dir = tmpDir();
    const fifo = join(dir, 'capture.fifo');
    const stuck = join(dir, 'stuck.fifo');
    execFileSync('mkfifo', [fifo]);
    execFileSync('mkfifo', [stuck]); // nobody reads it: the file plugin's writes block
    writeFileSync(
      join(dir, '.asoundrc'),
      `pcm.twbench {\n  type file\n  slave.pcm "null"\n  file "${join(dir, 'unused.raw')}"\n  infile "${fifo}"\n  format "raw"\n}\n` +
        `pcm.twstuck {\n  type file\n  slave.pcm "null"\n  file "${stuck}"\n  format "raw"\n}\n`,
    );
    const fh: FileHandle = await open(fifo, 'r+');
    const s = await serveWith(
      dir,
      `stream:\n  source: device\n  blockFrames: ${BLOCK}\n  device:\n    input: twbench\n    playback: twstuck\n    sampleRate: ${RATE}\n    channels: 2\n`,
      { HOME: dir },
    );
    try {
      // 8 s of capture: more than the pipe and the capped queue toward the stuck device hold.
      const frames = 4 * FRAMES;
      const raw = Buffer.alloc(frames * 4);
      for (let i = 0; i < frames; i++) raw.writeInt16LE(Math.round(3000 * Math.sin(i * 0.31)), i * 4);
      for (let at = 0; at < frames; at += 2048) {
        await fh.write(raw.subarray(at * 4, (at + 2048) * 4));
        await sleep((1000 * 2048) / RATE / 2);
      }
      await until(async () => (await s.metric('tapwarden_samples_processed_total')) >= frames, 20_000, 'all samples');
      expect(await s.metric('tapwarden_samples_processed_total')).toBe(frames);
      expect(await s.metric('tapwarden_queue_overruns_total')).toBe(0);
      expect(await s.metric('tapwarden_playback_dropped_blocks_total')).toBeGreaterThan(0);
    } finally {
      await fh.close();
      await s.stop();
    }
  });
});
