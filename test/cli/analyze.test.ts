import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { bandLimited, through, white } from '../helpers/signals.js';
import { cli, sox, tmpDir } from '../helpers/tools.js';

// analyze as a user runs it: on the demo (a path change and a fault burst), on a recording
// longer than the correlation span, on parts of one, on a damaged header and a dead reference.

describe('analyze on the demo bench recording', () => {
  const dir = tmpDir();
  cli(['demo', '--out', dir]);
  const rec = join(dir, 'bench-trial.wav');
  const r = cli(['analyze', rec, '--out', join(dir, 'a')]);
  const a = JSON.parse(readFileSync(join(dir, 'a', 'analysis.json'), 'utf8'));

  it('leaves the connector fault out of R and p, and says so', () => {
    expect(r.status).toBe(0);
    expect(a.windowsExcluded).toBeGreaterThanOrEqual(1);
    expect(r.stdout).toMatch(/samples used\s+\d+ \([\d.]+ s in \d+ windows; [1-9]\d* faulty windows left out\)/);
  });

  it('suggests a leak that replay confirms costs no cancellation (the suggestion is judged window by window)', () => {
    const leak = a.leak.suggestedConfig as number;
    expect(leak).toBeGreaterThan(0);
    writeFileSync(join(dir, 'leak.yaml'), `filter:\n  leak: ${leak}\n`);
    const base = JSON.parse((cli(['replay', rec, '--out', join(dir, 'r0')]), readFileSync(join(dir, 'r0', 'summary.json'), 'utf8')));
    expect(cli(['replay', rec, '--config', join(dir, 'leak.yaml'), '--out', join(dir, 'r1')]).status).toBe(0);
    const leaky = JSON.parse(readFileSync(join(dir, 'r1', 'summary.json'), 'utf8'));
    expect(base.cancellation.clean.medianDb - leaky.cancellation.clean.medianDb).toBeLessThan(1);
    expect(base.cancellation.clean.p5Db - leaky.cancellation.clean.p5Db).toBeLessThan(1);
    // ... and the largest candidate, which the worst window refuses, does cost it.
    const biggest = a.leak.candidates[0];
    expect(biggest.worstSegmentLossDb).toBeGreaterThan(3);
    writeFileSync(join(dir, 'big.yaml'), `filter:\n  leak: ${biggest.configLeak}\n`);
    expect(cli(['replay', rec, '--config', join(dir, 'big.yaml'), '--out', join(dir, 'r2')]).status).toBe(0);
    const big = JSON.parse(readFileSync(join(dir, 'r2', 'summary.json'), 'utf8'));
    expect(base.cancellation.clean.medianDb - big.cancellation.clean.medianDb).toBeGreaterThan(3);
  });
});

describe('analyze on other recordings', () => {
  const dir = tmpDir();
  const rate = 4000;

  it('a recording longer than a minute (90 s): R and p from its first 60 s, the spectrum from all of it', () => {
    const n = 90 * rate;
    const x = bandLimited(n, 0.05, 0.3, 0.2, 961);
    const d = through([0.5, -0.3, 0.2], x, white(n, 0.001, 962));
    const f = join(dir, 'long.wav');
    const w = new WavWriter(f, rate, 2, 'pcm16');
    w.write([x, d], n);
    w.close();
    const r = cli(['analyze', f, '--taps', '16', '--out', join(dir, 'long')]);
    expect(r.status, r.stderr).toBe(0);
    const a = JSON.parse(readFileSync(join(dir, 'long', 'analysis.json'), 'utf8'));
    expect(a.samplesUsed).toBe(60 * rate);
    expect(a.range).toEqual({ fromSeconds: 0, toSeconds: 90 });
    const part = cli(['analyze', f, '--taps', '16', '--from', '70', '--to', '80', '--out', join(dir, 'part')]);
    expect(part.status).toBe(0);
    const b = JSON.parse(readFileSync(join(dir, 'part', 'analysis.json'), 'utf8'));
    expect(b.samplesUsed).toBe(10 * rate);
    expect(b.range).toEqual({ fromSeconds: 70, toSeconds: 80 });
  });

  it('a damaged header is read with a warning, as replay does', () => {
    const f = join(dir, 'killed.wav');
    sox('-n', '-r', String(rate), '-c', '2', '-b', '16', f, 'synth', '4', 'pinknoise', 'pinknoise', 'vol', '0.3');
    const bytes = readFileSync(f);
    bytes.writeUInt32LE(0, bytes.indexOf('data') + 4); // a recorder killed before it wrote the size
    writeFileSync(f, bytes);
    const r = cli(['analyze', f, '--out', join(dir, 'killed')]);
    expect(r.status).toBe(0);
    expect(r.stderr).toMatch(/^tapwarden: warning: data chunk size field says 0 bytes but \d+ follow it; reading to the end of the file .*\[TW_WARN_INPUT\]$/m);
  });

  it('an all-zero reference gets one clear line, not figures', () => {
    const f = join(dir, 'dead.wav');
    const n = 3 * rate;
    const w = new WavWriter(f, rate, 2, 'pcm16');
    w.write([new Float64Array(n), white(n, 0.1, 963)], n);
    w.close();
    const r = cli(['analyze', f, '--out', join(dir, 'dead')]);
    expect(r.status).toBe(3);
    expect(r.stderr.trim()).toMatch(/^tapwarden: .*dead\.wav: the reference \(channel 0\) is all zeros from 0\.0 s to 3\.0 s; nothing to analyze .*\[TW_ERR_REFERENCE_SILENT\]$/);
  });
});
