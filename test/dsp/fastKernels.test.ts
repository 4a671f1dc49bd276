import { describe, expect, it } from 'vitest';
import { FixedAdaptiveKernel, FixedFirKernel } from '../../src/dsp/fixedKernel.js';
import { Float32AdaptiveKernel, Float32FirKernel } from '../../src/dsp/float32Kernel.js';
import { FloatAdaptiveKernel, FloatFirKernel } from '../../src/dsp/floatKernel.js';
import type { AdaptiveKernel, AdaptiveSpec, FirKernel } from '../../src/dsp/types.js';
import { WasmAdaptiveKernel, WasmFirKernel, fastKernelsAvailable } from '../../src/dsp/wasm/fastKernels.js';
import { bandLimited, spec, through, white } from '../helpers/signals.js';

// The fast (WebAssembly) kernels against the reference kernels, which DEVELOPERS.md defines
// operation by operation: bit for bit in fixed point and float32 (each operation one binary32
// rounding in both: Math.fround in JavaScript, f32 instructions in WebAssembly, whose
// specification rounds every f32 result to nearest even and never fuses), within rounding of the
// dot-product order in float64.

const n = 6000;
const x = bandLimited(n, 0.02, 0.4, 0.3, 301);
for (let i = 1000; i < 1010; i++) x[i] = 1.5 * Math.sign(x[i]!); // clips on input
const d = through([0.6, -0.3, 0.2, 0.1, -0.05], x, white(n, 0.01, 302));
const noise = white(n, 0.01, 303);

function drive(k: AdaptiveKernel, withNoise: boolean) {
  const y = new Float64Array(n);
  const e = new Float64Array(n);
  const cuts = [0, 1, 2, 50, 1500, 1501, 2600, 4000, n];
  for (let c = 0; c + 1 < cuts.length; c++) {
    if (c === 4) k.adapting = false; // frozen for a stretch
    if (c === 6) k.adapting = true;
    k.run(x, d, withNoise ? noise : null, y, e, cuts[c]!, cuts[c + 1]!);
  }
  return { y, e, w: k.getWeights(), sat: { weights: k.weightSaturations, signal: k.signalSaturations } };
}

function driveFir(k: FirKernel, w: Float64Array) {
  k.setWeights(w);
  const y = new Float64Array(n);
  const e = new Float64Array(n);
  // Odd cuts: the float32 FIR filters four samples at a time and the rest one by one.
  k.run(x, d, y, e, 0, 1);
  k.run(x, d, y, e, 1, 2999);
  k.run(x, d, y, e, 2999, n);
  return { y, e, sat: k.signalSaturations };
}

const bits = (a: Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);

describe('fast kernels reproduce the reference kernels', () => {
  it('are built', () => expect(fastKernelsAvailable()).toBe(true));

  const fixedCases: Array<Partial<AdaptiveSpec> & { noise?: boolean }> = [];
  for (const arithmetic of ['q15', 'q31'] as const)
    for (const algorithm of ['lms', 'nlms'] as const)
      for (const rounding of ['nearest', 'truncate'] as const)
        for (const variant of [0, 1, 2])
          fixedCases.push({
            arithmetic,
            algorithm,
            rounding,
            taps: [1, 7, 16, 33][variant + (algorithm === 'nlms' ? 1 : 0)]!,
            step: algorithm === 'lms' ? 0.2 : 0.9,
            delta: 1e-4,
            leak: variant === 1 ? 0.003 : 0,
            leakShift: variant === 2 ? 12 : null,
            meanRemovalEvery: variant === 1 ? 97 : null,
            noise: variant !== 0,
          });

  // Without noise the update is fused with the next output (q15's in SIMD lanes, four taps a
  // step, the odd taps one by one).
  it.each([
    ['q15', 13, 'nearest', null, 0, false],
    ['q15', 16, 'truncate', 9, 0, false],
    ['q15', 7, 'nearest', null, 0.02, false],
    ['q15', 16, 'nearest', null, 0, true],
    ['q31', 13, 'nearest', null, 0, false],
    ['q31', 16, 'truncate', 9, 0, false],
    ['q31', 7, 'nearest', null, 0.02, false],
  ] as const)('bit for bit where weights saturate: %s LMS, a step far too large, %i taps, %s, leakShift %s, leak %s, noise %s', (arithmetic, taps, rounding, leakShift, leak, withNoise) => {
    const s = spec({ arithmetic, algorithm: 'lms', rounding, taps, step: 40, leakShift, leak });
    const ref = drive(new FixedAdaptiveKernel(s), withNoise);
    const fast = drive(new WasmAdaptiveKernel(s), withNoise);
    expect(ref.sat.weights).toBeGreaterThan(10);
    expect(fast.sat).toEqual(ref.sat);
    expect(fast.w).toEqual(ref.w);
    expect(bits(fast.e).equals(bits(ref.e))).toBe(true);
  });

  for (const c of fixedCases) {
    it(`bit for bit: ${c.arithmetic} ${c.algorithm} ${c.rounding}, ${c.taps} taps, leak ${c.leak}, leakShift ${c.leakShift}, mean removal ${c.meanRemovalEvery}, noise ${c.noise}`, () => {
      const s = spec(c);
      const ref = drive(new FixedAdaptiveKernel(s), c.noise!);
      const fast = drive(new WasmAdaptiveKernel(s), c.noise!);
      expect(bits(fast.y).equals(bits(ref.y))).toBe(true);
      expect(bits(fast.e).equals(bits(ref.e))).toBe(true);
      expect(fast.w).toEqual(ref.w);
      expect(fast.sat).toEqual(ref.sat);
      expect(ref.sat.signal).toBeGreaterThan(0); // the clipped inputs are counted in both, as signal clips
      const firRef = driveFir(new FixedFirKernel(s), ref.w.map((v) => v * 3));
      const firFast = driveFir(new WasmFirKernel(s), ref.w.map((v) => v * 3));
      expect(bits(firFast.y).equals(bits(firRef.y))).toBe(true);
      expect(bits(firFast.e).equals(bits(firRef.e))).toBe(true);
      expect(firFast.sat).toBe(firRef.sat);
    });
  }

  for (const c of [
    { algorithm: 'nlms', taps: 1, step: 0.5, delta: 1e-6 },
    { algorithm: 'nlms', taps: 31, step: 0.5, delta: 1e-6, leak: 0.001, meanRemovalEvery: 97, noise: true },
    { algorithm: 'lms', taps: 33, step: 0.05, leakShift: 10, meanRemovalEvery: 101 },
    { algorithm: 'lms', taps: 8, step: 0.4, weightLimit: 0.25, noise: true },
    { algorithm: 'nlms', taps: 16, step: 1, delta: 0 },
  ] as Array<Partial<AdaptiveSpec> & { noise?: boolean }>) {
    it(`float32 bit for bit: ${JSON.stringify(c)}`, () => {
      const s = spec({ ...c, arithmetic: 'float32' });
      const ref = drive(new Float32AdaptiveKernel(s), c.noise ?? false);
      const fast = drive(new WasmAdaptiveKernel(s), c.noise ?? false);
      expect(bits(fast.y).equals(bits(ref.y))).toBe(true);
      expect(bits(fast.e).equals(bits(ref.e))).toBe(true);
      expect(bits(fast.w).equals(bits(ref.w))).toBe(true);
      expect(fast.sat).toEqual(ref.sat);
      if (c.weightLimit) expect(ref.sat.weights).toBeGreaterThan(0);
      const firRef = driveFir(new Float32FirKernel(s), ref.w.map((v) => v * 3));
      const firFast = driveFir(new WasmFirKernel(s), ref.w.map((v) => v * 3));
      expect(bits(firFast.y).equals(bits(firRef.y))).toBe(true);
      expect(bits(firFast.e).equals(bits(firRef.e))).toBe(true);
    });
  }

  for (const c of [
    { algorithm: 'nlms', taps: 32, step: 0.5, delta: 1e-6, leak: 0.001 },
    { algorithm: 'lms', taps: 33, step: 0.05, leakShift: 10, meanRemovalEvery: 101 },
    { algorithm: 'nlms', taps: 64, step: 1, delta: 1e-6, noise: true },
    { algorithm: 'lms', taps: 8, step: 0.4, weightLimit: 0.25 },
  ] as Array<Partial<AdaptiveSpec> & { noise?: boolean }>) {
    it(`float64 within rounding: ${JSON.stringify(c)}`, () => {
      const s = spec({ ...c, arithmetic: 'float64' });
      const ref = drive(new FloatAdaptiveKernel(s), c.noise ?? false);
      const fast = drive(new WasmAdaptiveKernel(s), c.noise ?? false);
      let worst = 0;
      for (let k = 0; k < s.taps; k++) worst = Math.max(worst, Math.abs(fast.w[k]! - ref.w[k]!));
      expect(worst).toBeLessThan(1e-10);
      let worstE = 0;
      for (let i = 0; i < n; i++) worstE = Math.max(worstE, Math.abs(fast.e[i]! - ref.e[i]!));
      expect(worstE).toBeLessThan(1e-10);
      expect(fast.sat).toEqual(ref.sat);
      const firRef = driveFir(new FloatFirKernel(s), ref.w);
      const firFast = driveFir(new WasmFirKernel(s), ref.w);
      for (let i = 0; i < n; i++) expect(Math.abs(firFast.e[i]! - firRef.e[i]!)).toBeLessThan(1e-12);
    });
  }
});

describe('retune: new step, leak, leakShift and mean removal mid-run (serve live settings)', () => {
  for (const arithmetic of ['float32', 'q15', 'q31', 'float64'] as const) {
    it(`${arithmetic}: the fast kernel follows the reference through a retune, and the retune takes effect`, () => {
      const s1 = spec({ arithmetic, algorithm: 'nlms', taps: 17, step: 0.5, delta: 1e-4 });
      const s2 = { ...s1, step: 0.1, leak: 0.002, leakShift: 11, meanRemovalEvery: 50 };
      const make = (fast: boolean) =>
        fast ? new WasmAdaptiveKernel(s1) : arithmetic === 'float32' ? new Float32AdaptiveKernel(s1) : arithmetic === 'float64' ? new FloatAdaptiveKernel(s1) : new FixedAdaptiveKernel(s1);
      const go = (k: AdaptiveKernel, retune: boolean) => {
        const y = new Float64Array(n);
        const e = new Float64Array(n);
        k.run(x, d, null, y, e, 0, 3001);
        if (retune) k.retune(s2);
        k.run(x, d, null, y, e, 3001, n);
        return { e, w: k.getWeights() };
      };
      const ref = go(make(false), true);
      const fast = go(make(true), true);
      if (arithmetic === 'float64') for (let i = 0; i < n; i++) expect(Math.abs(fast.e[i]! - ref.e[i]!)).toBeLessThan(1e-10);
      else expect(bits(fast.e).equals(bits(ref.e))).toBe(true);
      const unchanged = go(make(false), false);
      expect(bits(unchanged.e.subarray(0, 3001)).equals(bits(ref.e.subarray(0, 3001)))).toBe(true);
      expect(bits(unchanged.e.subarray(3001)).equals(bits(ref.e.subarray(3001)))).toBe(false);
    });
  }
});
