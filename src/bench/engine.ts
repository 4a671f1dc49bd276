import type { Algorithm, Arithmetic } from '../dsp/types.js';
import { GaussianNoise } from '../dsp/noise.js';
import { loadConfig } from '../config/load.js';
import type { Config } from '../config/schema.js';
import { DualPathEngine } from '../engine/dualPath.js';
import { engineSettingsOf } from '../engine/settings.js';

export interface BenchCase {
  readonly algorithm: Algorithm;
  readonly taps: number;
  readonly arithmetic: Arithmetic;
  readonly rate: number;
  readonly seconds: number;
  /** Dual paths run side by side on the one core, each on its own channel pair (default 1). */
  readonly channels?: number;
  /** pbfdaf only. */
  readonly blockSize?: number;
  readonly constrained?: boolean;
}

export interface BenchResult extends BenchCase {
  readonly samplesPerSecond: number;
  readonly realtimeFactor: number;
}

const BLOCK = 4096;
/** Blocks run before timing starts (so the JavaScript and WebAssembly tiers have optimized the hot code). */
export const WARM_BLOCKS = 48;

/** Synthetic bench input: a coloured reference and a measurement through a decaying path plus noise. */
export function synthetic(n: number, taps: number): { x: Float64Array; d: Float64Array } {
  const rng = new GaussianNoise(20261201);
  const x = new Float64Array(n);
  const d = new Float64Array(n);
  let s = 0;
  for (let i = 0; i < n; i++) {
    s = 0.5 * s + rng.next();
    x[i] = 0.1 * s;
  }
  const h = Array.from({ length: Math.min(taps, 32) }, (_, k) => 0.6 * 0.85 ** k * Math.cos(0.7 * k));
  for (let i = 0; i < n; i++) {
    let acc = 1e-3 * rng.next();
    for (let k = 0; k < h.length && k <= i; k++) acc += h[k]! * x[i - k]!;
    d[i] = acc;
  }
  return { x, d };
}

/** The embedded default config, with the case's filter: the same settings a user would run. */
export function benchConfig(c: BenchCase): Config {
  return loadConfig(undefined, {
    filter: {
      algorithm: c.algorithm,
      taps: c.taps,
      arithmetic: c.arithmetic,
      step: c.algorithm === 'lms' ? 0.01 : 0.5,
      ...(c.blockSize === undefined ? {} : { blockSize: c.blockSize }),
      ...(c.constrained === undefined ? {} : { constrained: c.constrained }),
    },
  });
}

/**
 * The whole dual path (adaptive kernel, clean kernel, statistics, supervisor) on synthetic data:
 * a warm-up of WARM_BLOCKS blocks of 4,096 samples (counted, not timed), then `seconds` timed.
 * Returns samples per second of wall time.
 */
export function benchEngine(c: BenchCase): BenchResult {
  const n = Math.round(c.seconds * c.rate);
  const { x, d } = synthetic(BLOCK * 4, c.taps);
  const config = benchConfig(c);
  const channels = c.channels ?? 1;
  const engines = Array.from({ length: channels }, () => new DualPathEngine(engineSettingsOf(config, c.rate)));
  const clean = new Float64Array(BLOCK);
  const adaptive = new Float64Array(BLOCK);
  const feed = (count: number) => {
    for (let done = 0; done < count; done += BLOCK) {
      const m = Math.min(BLOCK, count - done);
      const at = (done / BLOCK) % 4;
      const xs = x.subarray(at * BLOCK);
      const ds = d.subarray(at * BLOCK);
      for (let k = 0; k < channels; k++) engines[k]!.process(xs, ds, clean, adaptive, m);
    }
  };
  feed(WARM_BLOCKS * BLOCK);
  const t0 = process.hrtime.bigint();
  feed(n);
  const seconds = Number(process.hrtime.bigint() - t0) / 1e9;
  return { ...c, samplesPerSecond: n / seconds, realtimeFactor: n / seconds / c.rate };
}
