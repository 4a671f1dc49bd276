import { readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { WelchPsd, octaveBands, spectrumSegment } from '../../src/analysis/welch.js';
import { WavWriter } from '../../src/io/wav/writer.js';
import { through, white } from '../helpers/signals.js';
import { cli, tmpDir } from '../helpers/tools.js';

// Per-band figures of replay against values known in advance: a stationary linear path plus a
// wanted signal confined to the 1 kHz octave. There the coherence bound is
// 10 log10(1 + P_interference / P_signal) (Bendat & Piersol, Random Data, 6.1.4: 1 - C is the
// share no linear filter can remove), the clean path cancels up to that bound and not beyond, and
// what it leaves is the wanted signal: its signal-to-distortion ratio is high.

const dir = tmpDir('tapwarden-bands-');
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe('replay per octave band: coherence bound, achieved cancellation, survival of the truth', () => {
  it('a stationary path with a wanted signal in the 1 kHz octave', () => {
    const fs = 8000;
    const n = 30 * fs;
    const x = white(n, 0.2, 701);
    const h = [0.5, -0.3, 0.2, 0.1, -0.05, 0.02];
    const interference = through(h, x);
    // The wanted signal: two tones well inside the 707-1414 Hz octave (a Hann window leaks them
    // less than -90 dB into the next octaves).
    const s = Float64Array.from({ length: n }, (_, i) => 0.01 * Math.sin((2 * Math.PI * 950 * i) / fs) + 0.008 * Math.sin((2 * Math.PI * 1130 * i) / fs + 1));
    const d = Float64Array.from(interference, (v, i) => v + s[i]!);
    const rec = join(dir, 'rig.wav');
    const truth = join(dir, 'truth.wav');
    const w = new WavWriter(rec, fs, 2, 'float32');
    w.write([x, d], n);
    w.close();
    const t = new WavWriter(truth, fs, 1, 'float32');
    t.write([s], n);
    t.close();
    // The bound from the components the recording was built of: for independent additive noise,
    // 1 - C = P_s / (P_i + P_s) in each band.
    const band = (v: Float64Array, lo: number, hi: number) => {
      const p = new WelchPsd(spectrumSegment(fs), fs);
      p.push(v, v.length);
      const r = p.result();
      return r.psd.reduce((a, q, k) => (r.frequencies[k]! >= lo && r.frequencies[k]! < hi ? a + q : a), 0);
    };
    const oct = octaveBands(fs).find((b) => b.centreHz === 1000)!;
    const expectedBound = 10 * Math.log10(1 + band(interference, oct.lowHz, oct.highHz) / band(s, oct.lowHz, oct.highHz));
    const config = join(dir, 'slow.yaml');
    writeFileSync(config, 'filter:\n  step: 0.05\n');
    const r = cli(['replay', rec, '--truth', truth, '--config', config, '--out', join(dir, 'out')]);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/truth {7}wanted signal survived \(SDR per octave\): 1 kHz \d+\.\d dB/);
    const bands = JSON.parse(readFileSync(join(dir, 'out', 'summary.json'), 'utf8')).bands as Array<Record<string, number | null>>;
    const k = bands.find((b) => b.centreHz === 1000)!;
    // The coherence estimate against the components' powers, within the estimator's bias.
    expect(Math.abs(k.boundDb! - expectedBound)).toBeLessThan(0.5);
    // The clean path reaches the bound within 1.5 dB and cannot beat it by more than estimation error.
    expect(k.achievedDb!).toBeGreaterThan(k.boundDb! - 1.5);
    expect(k.achievedDb!).toBeLessThan(k.boundDb! + 0.5);
    // What is left in that band is mostly the wanted signal: it was boundDb below the interference
    // in the measurement (about -8 dB SDR); in the clean output it dominates by a margin.
    expect(k.survivedDb!).toBeGreaterThan(3);
    // No other band holds the truth; everywhere the achieved cancellation stays below the bound.
    for (const b of bands) {
      if (b.centreHz !== 1000) expect(b.survivedDb).toBeNull();
      if (b.boundDb !== null && b.achievedDb !== null && b.centreHz! >= 125) expect(b.achievedDb).toBeLessThan(b.boundDb + 0.5);
    }
  });

  it('--truth with another sample rate is one coded line', () => {
    const other = join(dir, 'other.wav');
    const w = new WavWriter(other, 16000, 1, 'float32');
    w.write([new Float64Array(100)], 100);
    w.close();
    const r = cli(['replay', join(dir, 'rig.wav'), '--truth', other, '--out', join(dir, 'never')]);
    expect(r.status).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/--truth .* is 100 frames at 16000 Hz; allowed: a recording at 8000 Hz of at least 240000 frames.*\[TW_ERR_USAGE\]/);
  });
});
