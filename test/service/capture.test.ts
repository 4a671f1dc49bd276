import { createHash } from 'node:crypto';
import { readFileSync, readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { serveWith, stopAll, until } from '../helpers/serve.js';
import { cli, sox, tmpDir } from '../helpers/tools.js';

// Captured episodes: serve writes the input around a cause to capture.dir, and `tapwarden
// replay` of the capture makes the decisions the live runs made. The checks are counts, file
// contents and SoX's reading of the WAV; none is a time.

const TOKEN = 'bench-7-control-token-0123456789';
const wavs = (dir: string) =>
  readdirSync(dir)
    .filter((f) => f.endsWith('.wav'))
    .sort();

describe('captured episodes', () => {
  afterEach(stopAll);

  it('a refused window and a drift forecast capture the input; replay of the capture makes the live decisions', async () => {
    const dir = tmpDir();
    cli(['demo', '--out', dir]);
    const caps = join(dir, 'captures');
    // The demo's truncating q15 LMS: refused from the start and drifting toward the Q15 limit
    // (README "The demo bench"); two measurement channels, so each run resumes its own state.
    const s = await serveWith(
      dir,
      'input:\n  desiredChannels: [1, 2]\nfilter:\n  algorithm: lms\n  step: 0.05\n  arithmetic: q15\n  rounding: truncate\n' +
        `stream:\n  file: ${join(dir, 'bench-trial.wav')}\n  pace: free\n  loop: false\ncapture:\n  dir: ${caps}\n  secondsBefore: 3\n  secondsAfter: 2\n`,
    );
    let live: Record<string, unknown>[] = [];
    try {
      await s.logged((l) => String(l['msg']).startsWith('the stream ended'));
      await until(() => s.logs.some((l) => String(l['msg']).startsWith('episode captured')), 10_000, 'the capture written');
      live = s.logs.filter((l) => l['msg'] === 'supervisor decision').map((l) => l['decision'] as Record<string, unknown>);
      expect(await s.metric('tapwarden_captures_total{cause="refused"}')).toBeGreaterThanOrEqual(1);
      expect(await s.metric('tapwarden_captures_total{cause="forecast"}')).toBeGreaterThanOrEqual(1);
    } finally {
      await s.stop();
    }
    const files = wavs(caps);
    expect(files.length).toBeGreaterThanOrEqual(1);
    const wav = join(caps, files[0]!);
    expect(files[0]).toMatch(/^capture-\d{8}T\d{6}\.\d{3}Z-[a-z+]+-ch1-2\.wav$/);
    const side = JSON.parse(readFileSync(wav.replace(/\.wav$/, '.json'), 'utf8'));
    expect(side.format).toBe('tapwarden-capture/1');
    expect(side.causes.map((c: { cause: string }) => c.cause)).toEqual(expect.arrayContaining(['refused', 'forecast']));
    const refused = side.causes.find((c: { cause: string }) => c.cause === 'refused');
    expect(refused.decision).toMatchObject({ type: 'decision', outcome: 'rejected', channel: refused.channel, sample: refused.sample });
    expect(side.configHash).toBe(createHash('sha256').update(JSON.stringify(side.config)).digest('hex'));
    expect(side.runs.map((r: { channel: number }) => r.channel)).toEqual([1, 2]);
    // SoX reads the WAV: 64-bit float, the three input channels, the frames the side file says.
    expect(sox('--i', '-c', wav).trim()).toBe('3'); // channels 0..2 (the pump's, 3, is no run's here)
    expect(sox('--i', '-b', wav).trim()).toBe('64');
    expect(sox('--i', '-s', wav).trim()).toBe(String(side.frames));
    // A cause is preceded by at least secondsBefore of input (less only at the stream's start).
    expect(side.startSample).toBeLessThanOrEqual(Math.max(0, refused.sample - 3 * 16000));

    const out = join(dir, 'replayed');
    const r = cli(['replay', wav, '--out', out]);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/^capture\s+resumed from the live runs at stream time/m);
    const end = side.startSample + side.frames;
    for (const ch of [1, 2]) {
      const replayed = readFileSync(join(out, `ch${ch}`, 'decisions.ndjson'), 'utf8')
        .trim()
        .split('\n')
        .map((l) => JSON.parse(l))
        .filter((x) => x.type === 'decision');
      const expected = live.filter((d) => d['channel'] === ch && (d['sample'] as number) > side.startSample && (d['sample'] as number) <= end);
      expect(replayed.length).toBeGreaterThan(3);
      expect(replayed).toEqual(expected);
    }
    // The capture carries its config: a --config beside it is refused, in one line.
    const bad = cli(['replay', wav, '--config', join(dir, 'bench-trial.yaml'), '--out', join(dir, 'x')]);
    expect(bad.status).toBe(2);
    expect(bad.stderr.trim()).toMatch(/^tapwarden: replay: --config is not allowed with a capture .*allowed: --policy FILE to overlay it \[TW_ERR_USAGE\]$/);
    // A policy of another filter length cannot take the runs' state.
    const other = join(dir, 'longer.yaml');
    writeFileSync(other, 'filter:\n  taps: 128\n');
    const misfit = cli(['replay', wav, '--policy', other, '--out', join(dir, 'y')]);
    expect(misfit.status).toBe(3);
    expect(misfit.stderr.trim()).toMatch(/does not fit this run: .*\[TW_ERR_CAPTURE\]$/);
  });

  it('an operator mark captures with its note; the oldest captures go beyond capture.maxFiles; marks need captures on', async () => {
    const dir = tmpDir();
    const caps = join(dir, 'captures');
    const s = await serveWith(dir, `capture:\n  dir: ${caps}\n  secondsBefore: 0.5\n  secondsAfter: 0\n  maxFiles: 2\n  triggers: [mark]\n`, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    const post = (body: string) => s.get('/api/control/mark', { method: 'POST', headers: { 'content-type': 'application/json', authorization: `Bearer ${TOKEN}` }, body });
    try {
      await until(async () => (await s.metric('tapwarden_stream_seconds')) > 1, 10_000, 'a second of stream');
      for (let i = 1; i <= 3; i++) {
        const r = await post(JSON.stringify({ note: `clamp check ${i}`, channel: 1 }));
        expect(r.status).toBe(200);
        await until(async () => (await s.metric('tapwarden_captures_total{cause="mark"}')) === i, 10_000, `capture ${i}`);
      }
      expect(((await (await post('{"channel": 4}')).json()) as { error: { code: string } }).error.code).toBe('TW_ERR_HTTP_BODY');
    } finally {
      await s.stop();
    }
    const files = wavs(caps);
    expect(files).toHaveLength(2);
    const notes = files.map((f) => JSON.parse(readFileSync(join(caps, f.replace(/\.wav$/, '.json')), 'utf8')).causes[0].note);
    expect(notes).toEqual(['clamp check 2', 'clamp check 3']);

    // A capture that cannot be written (capture.dir is a file) is logged and counted; the service goes on.
    const blocked = join(dir, 'not-a-dir');
    writeFileSync(blocked, 'x');
    const bad = await serveWith(dir, `capture:\n  dir: ${blocked}\n  secondsBefore: 0.5\n  secondsAfter: 0\n  triggers: [mark]\n`, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    try {
      await until(async () => (await bad.metric('tapwarden_stream_seconds')) > 1, 10_000, 'a second of stream');
      const r = await bad.get('/api/control/mark', { method: 'POST', headers: { authorization: `Bearer ${TOKEN}` } });
      expect(r.status).toBe(200);
      await until(async () => (await bad.metric('tapwarden_capture_write_failures_total')) === 1, 10_000, 'the failure counted');
      // The log line is written after the count (the log is asynchronous): wait for it.
      await bad.logged((l) => String(l['msg']).startsWith('episode not captured: ') && l['code'] === 'TW_ERR_OUTPUT_WRITE', 10_000);
      expect((await bad.get('/readyz')).status).toBe(200);
    } finally {
      await bad.stop();
    }

    const off = await serveWith(dir, '', { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    try {
      const r = await off.get('/api/control/mark', { method: 'POST', headers: { authorization: `Bearer ${TOKEN}` } });
      expect(r.status).toBe(409);
      expect(((await r.json()) as { error: { code: string } }).error.code).toBe('TW_ERR_CAPTURE_OFF');
    } finally {
      await off.stop();
    }
  });
});
