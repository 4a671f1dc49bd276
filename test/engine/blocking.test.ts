import { describe, expect, it } from 'vitest';
import { ARITHMETICS } from '../../src/dsp/types.js';
import { runEngine, settings } from '../helpers/engine.js';
import { bandLimited, through, white } from '../helpers/signals.js';

// Feeding one sample at a time or whole blocks gives the same output (common practice for block
// processors; bit-exact is the project's own requirement for every arithmetic).
describe('sample-by-sample and block feeding give identical results', () => {
  const n = 12_000;
  const x = bandLimited(n, 0.03, 0.3, 0.2, 91);
  const h = Array.from({ length: 12 }, (_, k) => 0.5 * 0.8 ** k * Math.cos(k));
  const d = through(h, x, white(n, 0.002, 92));
  for (let i = 7000; i < 7100; i++) d[i] = 0.9 * Math.sign(Math.sin(i)); // a burst of garbage

  for (const arithmetic of ARITHMETICS) {
    for (const algorithm of ['lms', 'nlms'] as const) {
      it(`${arithmetic} ${algorithm}, with noise injection, leak and mean removal`, () => {
        const s = settings({
          arithmetic,
          algorithm,
          step: algorithm === 'lms' ? 0.05 : 0.5,
          rounding: arithmetic.startsWith('q') ? 'truncate' : 'nearest',
          leak: 0.001,
          leakShift: arithmetic.startsWith('q') ? 14 : null,
          meanRemovalEvery: 500,
          noiseInjectionDb: -50,
        });
        const whole = runEngine(s, x, d, [n]);
        const single = runEngine(s, x, d, [1]);
        const ragged = runEngine(s, x, d, [1, 17, 256, 3, 1000]);
        expect(whole.handoffs.length).toBeGreaterThan(0);
        for (const other of [single, ragged]) {
          expect(Buffer.from(other.clean.buffer).equals(Buffer.from(whole.clean.buffer))).toBe(true);
          expect(Buffer.from(other.adaptive.buffer).equals(Buffer.from(whole.adaptive.buffer))).toBe(true);
          expect(other.windows.map((w) => w.decision)).toEqual(whole.windows.map((w) => w.decision));
          // Every window figure to the last bit: the sums run in sample order whatever the blocks.
          expect(other.windows).toEqual(whole.windows);
          expect(other.engine.adaptiveWeights()).toEqual(whole.engine.adaptiveWeights());
        }
      });
    }
  }

  for (const constrained of [true, false]) {
    it(`float64 pbfdaf (${constrained ? 'constrained' : 'unconstrained'}), with leak`, () => {
      const s = settings({ algorithm: 'pbfdaf', taps: 32, blockSize: 16, constrained, step: 0.5, leak: 0.001 });
      const whole = runEngine(s, x, d, [n]);
      const ragged = runEngine(s, x, d, [1, 17, 256, 3, 1000]);
      expect(whole.handoffs.length).toBeGreaterThan(0);
      expect(Buffer.from(ragged.clean.buffer).equals(Buffer.from(whole.clean.buffer))).toBe(true);
      expect(Buffer.from(ragged.adaptive.buffer).equals(Buffer.from(whole.adaptive.buffer))).toBe(true);
      expect(ragged.windows.map((w) => w.decision)).toEqual(whole.windows.map((w) => w.decision));
      expect(ragged.windows).toEqual(whole.windows);
    });
  }
});
