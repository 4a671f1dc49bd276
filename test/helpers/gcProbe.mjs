// Counts garbage collections while a run processes blocks in steady state, in a process of its
// own (the test runner's own traffic would be counted otherwise). Prints one JSON line.
//   node gcProbe.mjs '<filter overrides as JSON>' BLOCKS
import { PerformanceObserver } from 'node:perf_hooks';
import { Run } from '../../dist/run/run.js';
import { GaussianNoise } from '../../dist/dsp/noise.js';

const [json, blocksArg] = process.argv.slice(2);
const filter = JSON.parse(json);
const blocks = Number(blocksArg);
const fs = 8000;
const BLOCK = 256;
const x = new Float64Array(BLOCK * 64);
new GaussianNoise(1).fill(x, 0.1);
const d = x.map((v, i) => 0.5 * v + 0.2 * (x[i - 1] ?? 0));
const xs = Array.from({ length: 64 }, (_, b) => x.subarray(b * BLOCK, (b + 1) * BLOCK));
const ds = Array.from({ length: 64 }, (_, b) => d.subarray(b * BLOCK, (b + 1) * BLOCK));
let work;
{
  const settings = {
    sampleRate: fs,
    filter: { algorithm: 'nlms', taps: 32, step: 0.5, delta: 1e-6, leak: 0, leakShift: null, meanRemovalEvery: null, arithmetic: 'float64', rounding: 'nearest', weightLimit: 1000, blockSize: 32, constrained: true, noiseInjectionDb: null, noiseSeed: 1, ...filter },
    // No window closes while measuring: anything collected was allocated per block or per sample.
    supervisor: { windowSeconds: 1e6, crossfadeSeconds: 0.01, minCancellationDb: 6, maxWeightMean: 0.1, marginDb: 1, passesRequired: 1, rollbackAfter: null, minReferencePowerDb: null },
    outputSignal: 'error',
  };
  const run = new Run(settings, 1, [{ onRecord: () => {}, onBlock: () => {} }], BLOCK);
  work = (n) => {
    for (let b = 0; b < n; b++) run.process(xs[b % 64], ds[b % 64], BLOCK);
  };
}
// Steady state: warmed up, and the optimizing compiler's background jobs done (on a loaded
// machine they finish late, and until then unoptimized code may box numbers on the heap).
work(2000);
await new Promise((resolve) => setTimeout(resolve, 300));
work(2000);
const seen = [];
const obs = new PerformanceObserver((list) => seen.push(...list.getEntries()));
obs.observe({ entryTypes: ['gc'] });
const t0 = performance.now();
work(blocks);
const t1 = performance.now();
setTimeout(() => {
  obs.disconnect();
  const gcs = seen.filter((e) => e.startTime >= t0 && e.startTime <= t1).length;
  process.stdout.write(JSON.stringify({ gcs, blocks, seconds: (t1 - t0) / 1000 }) + '\n');
}, 50);
