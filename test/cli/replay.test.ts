import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { spawnSync } from 'node:child_process';
import { CLI, cli, sox, tmpDir } from '../helpers/tools.js';

/** One line on stderr, no stack trace. */
function expectOneLineError(r: { status: number; stderr: string }, pattern: RegExp): void {
  expect(r.status).not.toBe(0);
  const lines = r.stderr.trim().split('\n');
  expect(lines).toHaveLength(1);
  expect(lines[0]).toMatch(pattern);
  expect(r.stderr).not.toMatch(/\n\s+at /);
}

describe('tapwarden replay on the embedded default (the demo bench recording)', () => {
  const dir = tmpDir();
  const r = cli(['replay', '--out', join(dir, 'out')]);

  it('prints a short human summary and exits 0', () => {
    expect(r.status).toBe(0);
    expect(r.stdout).toMatch(/recording\s+.*bench-trial\.wav: 40\.0 s at 16000 Hz/);
    expect(r.stdout).toMatch(/handoffs\s+\d+ accepted, \d+ rejected/);
    expect(r.stdout.trim().split('\n').length).toBeLessThanOrEqual(10);
  });

  it('writes summary.json with the documented fields, and outputs SoX can read', () => {
    const s = JSON.parse(readFileSync(join(dir, 'out', 'summary.json'), 'utf8'));
    for (const key of ['sampleRate', 'samples', 'taps', 'config', 'handoffs', 'events', 'weights', 'series', 'saturations', 'nonFiniteSamples', 'outOfRangeSamples', 'judgement', 'cancellation', 'drift']) {
      expect(s).toHaveProperty(key);
    }
    expect(s.sampleRate).toBe(16000);
    expect(s.samples).toBe(640000);
    expect(s.config.filter.algorithm).toBe('nlms');
    expect(s.weights.adaptive).toHaveLength(64);
    expect(s.weights.clean).toHaveLength(64);
    expect(s.handoffs.accepted).toBeGreaterThan(0);
    expect(s.handoffs.rejected).toBeGreaterThan(0); // the connector glitch
    const ev = s.events.find((e: { outcome: string }) => e.outcome === 'rejected');
    expect(ev).toMatchObject({ type: 'decision', sample: expect.any(Number), timeSeconds: expect.any(Number), outcome: 'rejected', failed: expect.any(Array) });
    expect(s.series[0]).toMatchObject({
      timeSeconds: 0.5,
      adaptive: { errorPowerDb: expect.any(Number), cancellationDb: expect.any(Number), weightMean: expect.any(Number), maxAbsWeight: expect.any(Number), weightSaturations: 0, signalSaturations: 0 },
      clean: { errorPowerDb: expect.any(Number), cancellationDb: expect.any(Number) },
    });
    // decisions.ndjson: one record per window, the same records as the summary's events.
    const log = readFileSync(join(dir, 'out', 'decisions.ndjson'), 'utf8').trim().split('\n').map((l) => JSON.parse(l));
    const decisions = log.filter((r) => r.type === 'decision');
    expect(decisions).toHaveLength(80);
    expect(decisions.filter((r) => r.outcome !== 'idle')).toEqual(s.events);
    expect(log.filter((r) => r.type === 'handoff')).toHaveLength(s.handoffs.accepted);
    for (const f of ['clean.wav', 'adaptive.wav']) expect(sox('--i', join(dir, 'out', f))).toMatch(/= 640000 samples/);
  });

  it('the clean output is the measurement with the motor cancelled: close to the specimen signal alone', () => {
    // SoX mixes clean.wav with the inverted truth; what remains is the canceller's residual.
    const out = join(dir, 'out');
    const stats = (f: string, ...effects: string[]) => Number(sox(f, '-n', ...effects, 'stats').match(/RMS lev dB\s+(\S+)/)![1]);
    const diff = join(out, 'residual.wav');
    sox('-m', join(out, 'clean.wav'), '-v', '-1', join(out, 'bench-trial-signal.wav'), diff, 'trim', '5', '15');
    const measurement = join(out, 'measurement.wav');
    sox(join(out, 'bench-trial.wav'), measurement, 'remix', '2', 'trim', '5', '15');
    expect(stats(measurement) - stats(diff)).toBeGreaterThan(25);
  });
});

describe('the fixed-point demo configs (the drift the product exists to handle)', () => {
  const dir = tmpDir();
  cli(['demo', '--out', dir]);
  const run = (cfg: string) => {
    const out = join(dir, cfg.replace('.yaml', '-out'));
    const r = cli(['replay', join(dir, 'bench-trial.wav'), '--config', join(dir, cfg), '--out', out]);
    expect(r.status).toBe(0);
    return JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
  };

  it('q15 truncate without leak: the weight mean drifts, taps saturate, the supervisor refuses every handoff', () => {
    const s = run('q15-drift.yaml');
    expect(s.handoffs.accepted).toBe(0);
    expect(s.handoffs.rejectedBy.weightMean).toBeGreaterThan(10);
    expect(Math.max(...s.series.map((p: { adaptive: { maxAbsWeight: number } }) => p.adaptive.maxAbsWeight))).toBe(1);
  });

  it('q15 with leakShift 14: bounded weights and handoffs', () => {
    const s = run('q15-leak.yaml');
    expect(s.handoffs.accepted).toBeGreaterThan(0);
    expect(Math.max(...s.series.map((p: { adaptive: { weightMean: number } }) => Math.abs(p.adaptive.weightMean)))).toBeLessThan(0.05);
  });
});

describe('bad input: one clear line, a non-zero exit, no stack trace', () => {
  const dir = tmpDir();
  const good = join(dir, 'good.wav');
  sox('-n', '-r', '8000', '-c', '2', '-b', '16', good, 'synth', '2', 'pinknoise', 'pinknoise', 'vol', '0.3');

  it('a truncated file', () => {
    const f = join(dir, 'truncated.wav');
    writeFileSync(f, readFileSync(good).subarray(0, 30));
    expectOneLineError(cli(['replay', f, '--out', dir]), /^tapwarden: .*truncated.wav is truncated: .*\[TW_ERR_WAV_TRUNCATED\]$/);
  });

  it('a file that is not WAV', () => {
    const f = join(dir, 'notes.wav');
    writeFileSync(f, 'trial 7 notes: clamp re-torqued at 14:02\n');
    expectOneLineError(cli(['replay', f, '--out', dir]), /is not a WAV file: it starts with "tria", not "RIFF" \[TW_ERR_WAV_NOT_RIFF\]$/);
  });

  it('an unsupported encoding', () => {
    const f = join(dir, 'ulaw.wav');
    sox('-n', '-r', '8000', '-c', '2', '-e', 'u-law', f, 'synth', '0.5', 'sine', '300');
    expectOneLineError(cli(['replay', f, '--out', dir]), /unsupported encoding format tag 0x0007 \(mu-law\); allowed: .*\[TW_ERR_WAV_ENCODING\]$/);
  });

  it('a missing channel', () => {
    const f = join(dir, 'mono.wav');
    sox('-n', '-r', '8000', '-c', '1', f, 'synth', '0.5', 'sine', '300');
    expectOneLineError(cli(['replay', f, '--out', dir]), /mono.wav has 1 channel\(s\) \(0..0\) but input.desiredChannel = 1 \[TW_ERR_WAV_CHANNEL\]$/);
  });

  it('a missing file', () => {
    expectOneLineError(cli(['replay', join(dir, 'nope.wav'), '--out', dir]), /cannot open .*nope.wav: ENOENT/);
  });

  it('NaN and Inf in a float file are counted and replaced, never propagated', () => {
    const f = join(dir, 'nan.wav');
    const n = 16000;
    const ref = new Float64Array(n).map((_, i) => 0.3 * Math.sin(i * 0.3) + 0.1 * Math.sin(i * 1.7));
    const des = ref.map((v, i) => (i % 1000 === 7 ? NaN : i % 1500 === 3 ? -Infinity : 0.5 * v));
    ref[100] = Infinity;
    // tapwarden's own writer refuses non-finite samples, so this file is put together by hand.
    const w = new WavWriter(f, 8000, 2, 'float32');
    w.write([new Float64Array(n), new Float64Array(n)], n);
    w.close();
    const bytes = readFileSync(f);
    const dataAt = bytes.length - n * 8;
    for (let i = 0; i < n; i++) {
      bytes.writeFloatLE(ref[i]!, dataAt + i * 8);
      bytes.writeFloatLE(des[i]!, dataAt + i * 8 + 4);
    }
    writeFileSync(f, bytes);
    const out = join(dir, 'nan-out');
    const r = cli(['replay', f, '--out', out]);
    expect(r.status).toBe(0);
    const s = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    expect(s.nonFiniteSamples).toBe(16 + 11 + 1);
    expect(s.outputs.nonFiniteSamples).toBe(0);
    expect(s.handoffs.rejectedBy.nonFinite).toBeGreaterThan(0);
    for (const wav of ['clean.wav', 'adaptive.wav']) {
      const stats = sox(join(out, wav), '-n', 'stats');
      expect(stats).not.toMatch(/nan|inf/i);
      expect(Number(stats.match(/Pk lev dB\s+(\S+)/)![1])).toBeLessThan(0);
    }
  });

  it('an invalid config names the key, the value and what is allowed', () => {
    const cases: Array<[string, RegExp]> = [
      ['filter:\n  algorithm: rls\n', /filter.algorithm = "rls" is not allowed; allowed: lms, nlms/],
      ['filter:\n  taps: 0\n', /filter.taps = 0 is not allowed; allowed: >= 1/],
      ['filter:\n  stepp: 0.1\n', /filter.stepp is not a known key; known keys here: algorithm, taps, step/],
      ['filter:\n  step: 2.5\n', /filter.step = 2.5 is not allowed; allowed: 0 < step < 2 \(the NLMS stability bound\)/],
      ['supervisor:\n  windowSeconds: fast\n', /supervisor.windowSeconds = "fast" is not allowed; allowed: number in 0.001..3600/],
      ['filter: [1, 2\n', /is not valid YAML/],
    ];
    for (const [text, pattern] of cases) {
      const f = join(dir, 'bad.yaml');
      writeFileSync(f, text);
      expectOneLineError(cli(['replay', good, '--config', f, '--out', dir]), pattern);
    }
  });

  it('unknown options and commands', () => {
    expectOneLineError(cli(['replay', '--speed', '2']), /^tapwarden: replay: Unknown option '--speed'; see 'tapwarden replay --help' \[TW_ERR_USAGE\]$/);
    expectOneLineError(cli(['rewind']), /^tapwarden: unknown command "rewind"; commands: .* \[TW_ERR_USAGE\]$/);
    expectOneLineError(cli(['replay', 'a.wav', 'b.wav']), /^tapwarden: replay: expected 0 to 1 argument\(s\), got 2/);
  });

  it('shows a progress bar on stderr when it is a terminal, and none otherwise', () => {
    // script(1) (util-linux) runs the command on a pseudo-terminal.
    const run = spawnSync('script', ['-qec', `${process.execPath} ${CLI} replay ${good} --out ${join(dir, 'tty')}`, '/dev/null'], { encoding: 'utf8' });
    expect(run.status).toBe(0);
    expect(run.stdout).toMatch(/replay \[█+\] 100% \| 16000\/16000 samples/);
    const piped = cli(['replay', good, '--out', join(dir, 'piped')]);
    expect(piped.stderr).toBe('');
  });

  it('every command has --help', () => {
    for (const c of ['demo', 'replay', 'serve', 'devices', 'analyze', 'bench']) {
      const r = cli([c, '--help']);
      expect(r.status).toBe(0);
      expect(r.stdout).toMatch(new RegExp(`^Usage: tapwarden ${c}`));
    }
  });
});
