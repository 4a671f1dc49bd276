import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import { FixedAdaptiveKernel } from '../../src/dsp/fixedKernel.js';
import { FloatAdaptiveKernel } from '../../src/dsp/floatKernel.js';
import { bandLimited, spec, through, white } from '../helpers/signals.js';

// The multiple-input NLMS filter (Haykin, Adaptive Filter Theory, the multiple-input form; Rey
// Vega & Rey, A Rapid Introduction to Adaptive Filtering, NLMS; docs/REFERENCES.md "Multiple-input
// LMS/NLMS"): K references, one L-tap filter each, one error, the step normalized by the energy
// of all regressors together. Checked against an independent numpy implementation of the same
// recursion, against the single-input kernel for K = 1, and against the system it identifies.

const numpy = spawnSync('python3', ['-c', 'import numpy'], { stdio: 'ignore' }).status === 0;
const n = 6000;
const L = 12;
const x1 = bandLimited(n, 0.02, 0.4, 0.3, 801);
const x2 = white(n, 0.2, 802);
const h1 = Array.from({ length: L }, (_, k) => 0.6 * 0.8 ** k * Math.cos(k));
const h2 = Array.from({ length: L }, (_, k) => (k === 3 ? 0.5 : k === 7 ? -0.25 : 0));
const d = through(h2, x2, through(h1, x1, white(n, 1e-4, 803)));
const interleaved = new Float64Array(2 * n);
for (let i = 0; i < n; i++) (interleaved[2 * i] = x1[i]!), (interleaved[2 * i + 1] = x2[i]!);
const s = { ...spec({ algorithm: 'nlms', taps: L, step: 0.4, delta: 1e-6, leak: 0.001, meanRemovalEvery: 700 }), references: 2 };

function ours(): { e: Float64Array; w: Float64Array } {
  const k = new FloatAdaptiveKernel(s);
  const y = new Float64Array(n);
  const e = new Float64Array(n);
  k.run(interleaved, d, null, y, e, 0, n);
  return { e, w: k.getWeights() };
}

describe('multiple-input LMS/NLMS (two references)', () => {
  it.skipIf(!numpy)('matches numpy running the same recursion (errors and final weights)', () => {
    const script = `import json,sys,numpy as np
v=json.load(sys.stdin); x=[np.array(v['x1']),np.array(v['x2'])]; d=np.array(v['d']); L=${L}; mu=${s.step}; delta=${s.delta}; gamma=${s.leak}; every=${s.meanRemovalEvery}
w=np.zeros((2,L)); u=np.zeros((2,L)); e=np.zeros(len(d)); count=0
for n in range(len(d)):
    u=np.roll(u,1,axis=1); u[:,0]=[x[0][n],x[1][n]]
    y=np.sum(w*u); e[n]=d[n]-y
    w=w-mu*gamma*w+(mu/(delta+np.sum(u*u)))*e[n]*u
    count+=1
    if count>=every:
        count=0; w=w-w.mean(axis=1,keepdims=True)
print(json.dumps({'e':e.tolist(),'w':w.reshape(-1).tolist()}))`;
    const r = spawnSync('python3', ['-c', script], { input: JSON.stringify({ x1: Array.from(x1), x2: Array.from(x2), d: Array.from(d) }), encoding: 'utf8', maxBuffer: 1 << 26 });
    expect(r.status, r.stderr).toBe(0);
    const ref = JSON.parse(r.stdout) as { e: number[]; w: number[] };
    const got = ours();
    // Summation order differs (numpy's pairwise sums): equal to rounding, not bit for bit.
    let worst = 0;
    for (let i = 0; i < n; i++) worst = Math.max(worst, Math.abs(ref.e[i]! - got.e[i]!));
    expect(worst).toBeLessThan(1e-9);
    for (let k = 0; k < 2 * L; k++) expect(got.w[k]!).toBeCloseTo(ref.w[k]!, 9);
  });

  it.each(['nlms', 'lms'] as const)('a second reference that is silent leaves the one-reference filter, bit for bit (%s, noise injected)', (algorithm) => {
    // The one-reference kernel is held to the fast WebAssembly kernel bit for bit (fastKernels.test.ts).
    const sp = { ...s, algorithm, step: algorithm === 'lms' ? 0.02 : s.step, noiseInjectionDb: null };
    const silent = new Float64Array(2 * n);
    for (let i = 0; i < n; i++) silent[2 * i] = x1[i]!;
    const noise = white(n, 0.01, 804);
    const noise2 = new Float64Array(2 * n);
    for (let i = 0; i < n; i++) noise2[2 * i] = noise[i]!;
    const a = new FloatAdaptiveKernel({ ...sp, references: 2 });
    const b = new FloatAdaptiveKernel({ ...sp, references: 1 });
    const [ya, ea, yb, eb] = [0, 1, 2, 3].map(() => new Float64Array(n)) as [Float64Array, Float64Array, Float64Array, Float64Array];
    a.run(silent, d, noise2, ya, ea, 0, n);
    b.run(x1, d, noise, yb, eb, 0, n);
    expect(Buffer.from(ea.buffer).equals(Buffer.from(eb.buffer))).toBe(true);
    expect(Array.from(a.getWeights().subarray(0, L))).toEqual(Array.from(b.getWeights()));
    expect(a.getWeights().subarray(L).every((v) => v === 0)).toBe(true);
  });

  it('identifies both paths: reference k\'s filter converges to h_k (the Wiener solution of a noise-free identification)', () => {
    const k = new FloatAdaptiveKernel({ ...s, leak: 0, meanRemovalEvery: null });
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    k.run(interleaved, d, null, y, e, 0, n);
    const w = k.getWeights();
    // x1 is band-limited (0.02-0.4 of Nyquist): its filter is identified where x1 has energy, so
    // compare outputs through it; x2 is white, so its taps themselves converge.
    for (let j = 0; j < L; j++) expect(w[L + j]!).toBeCloseTo(h2[j]!, 2);
    let pe = 0;
    let pd = 0;
    for (let i = n - 1000; i < n; i++) (pe += e[i]! ** 2), (pd += d[i]! ** 2);
    expect(10 * Math.log10(pd / pe)).toBeGreaterThan(40);
  });
});

describe('multiple-input NLMS in fixed point (q15, q31)', () => {
  const fixed = (arithmetic: 'q15' | 'q31', references: number) => ({ ...s, arithmetic, rounding: 'nearest' as const, references });
  const run = (sp: ReturnType<typeof fixed>, x: Float64Array) => {
    const k = new FixedAdaptiveKernel(sp);
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    k.run(x, d, null, y, e, 0, n);
    return { e, w: k.getWeights() };
  };

  for (const arithmetic of ['q15', 'q31'] as const) {
    it(`${arithmetic}: a second reference that is silent changes nothing (its filter stays zero, bit for bit)`, () => {
      const silent = new Float64Array(2 * n);
      for (let i = 0; i < n; i++) silent[2 * i] = x1[i]!;
      const one = run(fixed(arithmetic, 1), x1);
      const two = run(fixed(arithmetic, 2), silent);
      expect(Buffer.from(two.e.buffer).equals(Buffer.from(one.e.buffer))).toBe(true);
      expect(Array.from(two.w.subarray(0, L))).toEqual(Array.from(one.w));
      expect(two.w.subarray(L).every((v) => v === 0)).toBe(true);
    });
  }

  // Within the formats' range [-1, 1): the recording above peaks past full scale.
  const xs = interleaved.map((v) => v / 4);
  const ds = d.map((v) => v / 4);

  it('q31 converges to the float64 multiple-input filter: the same weights and residual power', () => {
    const plain = { ...s, leak: 0, meanRemovalEvery: null };
    const q = new FixedAdaptiveKernel({ ...plain, arithmetic: 'q31', rounding: 'nearest', references: 2 });
    const k = new FloatAdaptiveKernel(plain);
    const eq = new Float64Array(n);
    const ef = new Float64Array(n);
    q.run(xs, ds, null, new Float64Array(n), eq, 0, n);
    k.run(xs, ds, null, new Float64Array(n), ef, 0, n);
    // The start differs (the gain register saturates there); past it both converge to the same
    // filter, and the residual errors carry the same power.
    const power = (e: Float64Array) => e.subarray(n - 2000).reduce((a, v) => a + v * v, 0);
    expect(Math.abs(10 * Math.log10(power(eq) / power(ef)))).toBeLessThan(0.5);
    const wq = q.getWeights();
    const wf = k.getWeights();
    for (let j = 0; j < 2 * L; j++) expect(Math.abs(wq[j]! - wf[j]!)).toBeLessThan(1e-3);
  });

  it('q15 identifies both paths to its resolution', () => {
    const k = new FixedAdaptiveKernel(fixed('q15', 2));
    const e = new Float64Array(n);
    k.run(xs, ds, null, new Float64Array(n), e, 0, n);
    const w = k.getWeights();
    let pe = 0;
    let pd = 0;
    for (let i = n - 1000; i < n; i++) (pe += e[i]! ** 2), (pd += ds[i]! ** 2);
    expect(10 * Math.log10(pd / pe)).toBeGreaterThan(25);
    for (let j = 0; j < L; j++) expect(w[L + j]!).toBeCloseTo(h2[j]!, 1);
  });
});
