import type { Algorithm, Arithmetic } from '../dsp/types.js';
import { GaussianNoise } from '../dsp/noise.js';
import { DualPathEngine } from '../engine/dualPath.js';

export interface BenchCase {
  readonly algorithm: Algorithm;
  readonly taps: number;
  readonly arithmetic: Arithmetic;
  readonly rate: number;
  readonly seconds: number;
  /** pbfdaf only. */
  readonly blockSize?: number;
  readonly constrained?: boolean;
}

export interface BenchResult extends BenchCase {
  readonly samplesPerSecond: number;
  readonly realtimeFactor: number;
}

const BLOCK = 4096;

/** Synthetic bench input: a coloured reference and a measurement through a decaying path plus noise. */
function synthetic(n: number, taps: number): { x: Float64Array; d: Float64Array } {
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

/**
 * The whole dual path (adaptive kernel, clean kernel, statistics, supervisor) on synthetic data:
 * a warm-up of at least one second of audio and 300 ms of wall time (so that the JavaScript and
 * WebAssembly tiers have optimized the hot code), then `seconds` timed. Returns samples per
 * second of wall time.
 */
export function benchEngine(c: BenchCase): BenchResult {
  const warm = c.rate;
  const n = Math.round(c.seconds * c.rate);
  const { x, d } = synthetic(BLOCK * 4, c.taps);
  const engine = new DualPathEngine({
    sampleRate: c.rate,
    filter: {
      algorithm: c.algorithm,
      taps: c.taps,
      step: c.algorithm === 'lms' ? 0.01 : 0.5,
      delta: 1e-6,
      leak: 0,
      leakShift: null,
      meanRemovalEvery: null,
      arithmetic: c.arithmetic,
      rounding: 'nearest',
      weightLimit: 1000,
      noiseInjectionDb: null,
      noiseSeed: 1,
      blockSize: c.blockSize ?? 256,
      constrained: c.constrained ?? true,
    },
    supervisor: {
      windowSeconds: 0.5,
      crossfadeSeconds: 0.02,
      minCancellationDb: 6,
      maxWeightMean: 0.1,
      marginDb: 1,
      passesRequired: 2,
      rollbackAfter: null,
      minReferencePowerDb: null,
    },
    outputSignal: 'error',
  });
  const clean = new Float64Array(BLOCK);
  const adaptive = new Float64Array(BLOCK);
  const feed = (count: number) => {
    for (let done = 0; done < count; done += BLOCK) {
      const m = Math.min(BLOCK, count - done);
      const at = (done / BLOCK) % 4;
      engine.process(x.subarray(at * BLOCK), d.subarray(at * BLOCK), clean, adaptive, m);
    }
  };
  const warmStart = process.hrtime.bigint();
  do feed(warm);
  while (Number(process.hrtime.bigint() - warmStart) < 300e6);
  const t0 = process.hrtime.bigint();
  feed(n);
  const seconds = Number(process.hrtime.bigint() - t0) / 1e9;
  return { ...c, samplesPerSecond: n / seconds, realtimeFactor: n / seconds / c.rate };
}
