import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { butterworth, filterInPlace } from '../../src/dsp/design.js';
import { WavWriter } from '../../src/io/wav/writer.js';
import { through, white } from '../helpers/signals.js';
import { cli, tmpDir } from '../helpers/tools.js';

// The drift forecast checked against replays in which the time a tap reaches the limit is
// known (the first window in which an adaptive weight store clips). Gitlin, Meadors &
// Weinstein, BSTJ 61(8), 1982: biased tap-update arithmetic on an input with unexcited
// directions drifts the taps until the registers overflow. A DC-blocked, band-limited sensor
// channel (0.06-0.2 fs) through a 32-tap path, replayed in q15 with truncating arithmetic.

interface Record {
  type: string;
  timeSeconds: number;
  adaptive: { weightSaturations: number };
  forecast: { limitEtaSeconds: number | null; limitEtaLowSeconds: number | null; limitEtaHighSeconds: number | null };
}

function replayDrift(name: string, rate: number, seconds: number, filter: string): Record[] {
  const dir = tmpDir();
  const n = rate * seconds;
  const x = white(n, 1, 601);
  filterInPlace([...butterworth('highpass', 8, 0.06 * rate, rate), ...butterworth('lowpass', 8, 0.2 * rate, rate)], x);
  let s = 0;
  for (const v of x) s += v * v;
  const g = 0.12 / Math.sqrt(s / n);
  for (let i = 0; i < n; i++) x[i]! *= g;
  const d = through(Array.from({ length: 32 }, (_, k) => 0.5 * 0.85 ** k * Math.cos(1.1 * k)), x, white(n, 0.003, 602));
  const w = new WavWriter(join(dir, `${name}.wav`), rate, 2, 'pcm16');
  w.write([x, d], n);
  w.close();
  writeFileSync(join(dir, `${name}.yaml`), `filter:\n  taps: 32\n  arithmetic: q15\n  rounding: truncate\n${filter}`);
  const r = cli(['replay', join(dir, `${name}.wav`), '--config', join(dir, `${name}.yaml`), '--out', join(dir, 'out')]);
  expect(r.status, r.stderr).toBe(0);
  return readFileSync(join(dir, 'out', 'decisions.ndjson'), 'utf8')
    .trim()
    .split('\n')
    .map((l) => JSON.parse(l) as Record)
    .filter((l) => l.type === 'decision');
}

function check(records: Record[], expectedBetween: [number, number]) {
  const first = records.find((r) => r.adaptive.weightSaturations > 0);
  expect(first).toBeDefined();
  const actual = first!.timeSeconds;
  expect(actual).toBeGreaterThan(expectedBetween[0]);
  expect(actual).toBeLessThan(expectedBetween[1]);
  const during = records.filter((r) => r.timeSeconds >= 0.2 * actual && r.timeSeconds <= 0.9 * actual);
  const made = during.filter((r) => r.forecast.limitEtaSeconds !== null);
  // A forecast in most windows, each within 25 % of the known time, each inside its own interval.
  expect(made.length).toBeGreaterThanOrEqual(0.8 * during.length);
  let covered = 0;
  for (const r of made) {
    const f = r.forecast;
    const predicted = r.timeSeconds + f.limitEtaSeconds!;
    expect(Math.abs(predicted / actual - 1), `at ${r.timeSeconds} s`).toBeLessThanOrEqual(0.25);
    expect(f.limitEtaLowSeconds!).toBeLessThanOrEqual(f.limitEtaSeconds!);
    if (f.limitEtaHighSeconds !== null) expect(f.limitEtaHighSeconds).toBeGreaterThanOrEqual(f.limitEtaSeconds!);
    const lo = r.timeSeconds + f.limitEtaLowSeconds!;
    const hi = f.limitEtaHighSeconds === null ? Infinity : r.timeSeconds + f.limitEtaHighSeconds;
    if (lo <= actual * 1.05 && actual * 0.95 <= hi) covered++;
  }
  return { actual, made: made.length, covered };
}

describe('drift forecast against replays where the time to the limit is known', () => {
  it('fast drift: LMS 0.02 at 2 kHz reaches the limit in about half a minute', () => {
    check(replayDrift('fast', 2000, 60, '  algorithm: lms\n  step: 0.02\n'), [15, 45]);
  });

  it('slow drift: the same at 400 Hz takes over two minutes, and the forecast sees it coming from a fifth of the way', () => {
    const r = check(replayDrift('slow', 400, 200, '  algorithm: lms\n  step: 0.02\n'), [100, 180]);
    // The interval (slope +- 2 standard errors, widened by how the early and late history
    // disagree) holds the known time in most windows.
    expect(r.covered).toBeGreaterThanOrEqual(0.7 * r.made);
  });

  it('NLMS 0.5 drifts too, and is forecast from its own taps (not the weight mean)', () => {
    check(replayDrift('nlms', 2000, 60, '  algorithm: nlms\n  step: 0.5\n'), [15, 45]);
  });

  it('with weight-mean removal nothing drifts, and nothing is forecast after the first 10 s', () => {
    const records = replayDrift('removed', 2000, 120, '  algorithm: lms\n  step: 0.02\n  meanRemovalEvery: 256\n');
    expect(records.every((r) => r.adaptive.weightSaturations === 0)).toBe(true);
    expect(records.filter((r) => r.timeSeconds >= 10 && r.forecast.limitEtaSeconds !== null)).toEqual([]);
  });
});
