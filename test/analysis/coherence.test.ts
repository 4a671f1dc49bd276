import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import { WelchCross, WelchMultiCross, bandBounds, octaveBands, replaySpectrumStride } from '../../src/analysis/welch.js';
import { bandLimited, through, white } from '../helpers/signals.js';

// Magnitude-squared coherence and the cancellation it bounds, -10 log10(1 - C) (Bendat & Piersol,
// Random Data, 4th ed., 5.2.5, 6.1.4 and 9.2.3; docs/REFERENCES.md "Coherence"), against
// scipy.signal.coherence on the same segments, and against the analytic coherence of a linear
// path with independent noise, C = S_s / (S_s + S_v).

const scipy = spawnSync('python3', ['-c', 'import scipy.signal'], { stdio: 'ignore' }).status === 0;

describe('coherence (Welch, periodic Hann, 50 % overlap)', () => {
  const fs = 8000;
  const n = 40_000;
  const x = bandLimited(n, 0.02, 0.45, 0.3, 601);
  const d = through([0.5, -0.3, 0.2, 0.1, 0.05, -0.02], x, white(n, 0.03, 602));

  it.skipIf(!scipy)('equals scipy.signal.coherence(window="hann", nperseg=N, noverlap=N/2, detrend=False) bin for bin', () => {
    const N = 512;
    const c = new WelchCross(N, fs);
    c.push(x, d, n);
    const ours = c.result();
    const script = `import json,sys,numpy as np; from scipy.signal import coherence
v=json.load(sys.stdin); f,C=coherence(np.array(v['x']),np.array(v['d']),fs=${fs},window='hann',nperseg=${N},noverlap=${N / 2},detrend=False)
print(json.dumps({'f':f.tolist(),'C':C.tolist()}))`;
    const r = spawnSync('python3', ['-c', script], { input: JSON.stringify({ x: Array.from(x), d: Array.from(d) }), encoding: 'utf8', maxBuffer: 1 << 26 });
    expect(r.status, r.stderr).toBe(0);
    const ref = JSON.parse(r.stdout) as { f: number[]; C: number[] };
    expect(ref.f).toHaveLength(ours.frequencies.length);
    let worst = 0;
    for (let k = 1; k < ref.C.length - 1; k++) worst = Math.max(worst, Math.abs(ref.C[k]! - ours.coherence[k]!));
    expect(worst).toBeLessThan(1e-9);
  });

  it.skipIf(!scipy)("replay's strided estimate with one reference equals scipy's coherence on the segments it uses laid end to end (noverlap=0)", () => {
    const N = 512;
    const stride = 3; // an odd one: the used segments sit one and a half segments apart
    const c = new WelchMultiCross(N, fs, stride, 1);
    // Fed in odd blocks: where a segment lies must not depend on them.
    for (let at = 0; at < n; at += 777) c.push([x.subarray(at, Math.min(n, at + 777))], [d.subarray(at, Math.min(n, at + 777))], Math.min(777, n - at));
    const ours = c.result();
    const period = (stride * N) / 2;
    const keep = (v: Float64Array) => {
      const out: number[] = [];
      for (let s = 0; s + N <= v.length; s += period) out.push(...v.subarray(s, s + N));
      return out;
    };
    const script = `import json,sys,numpy as np; from scipy.signal import coherence
v=json.load(sys.stdin); f,C=coherence(np.array(v['x']),np.array(v['d']),fs=${fs},window='hann',nperseg=${N},noverlap=0,detrend=False)
print(json.dumps({'C':C.tolist()}))`;
    const r = spawnSync('python3', ['-c', script], { input: JSON.stringify({ x: keep(x), d: keep(d) }), encoding: 'utf8', maxBuffer: 1 << 26 });
    expect(r.status, r.stderr).toBe(0);
    const ref = JSON.parse(r.stdout) as { C: number[] };
    expect(c.segments).toBe(keep(x).length / N);
    let worst = 0;
    for (let k = 1; k < ref.C.length - 1; k++) worst = Math.max(worst, Math.abs(ref.C[k]! - ours.coherence[k]!));
    expect(worst).toBeLessThan(1e-9);
  });

  it.skipIf(!scipy)('the multiple coherence of two references with each of two measurements equals numpy solving the cross-spectral matrix, and explains what one reference cannot', () => {
    const N = 512;
    const stride = 2;
    const x2 = bandLimited(n, 0.05, 0.45, 0.3, 621);
    const y = through([0.4, 0.2, -0.1], x2, d); // d holds x's path and noise; add x2's
    // One estimator for both measurements (the references' spectra formed once for both).
    const multi = new WelchMultiCross(N, fs, stride, 2, 2);
    for (let at = 0; at < n; at += 1000) multi.push([x.subarray(at), x2.subarray(at)], [y.subarray(at), d.subarray(at)], Math.min(1000, n - at));
    const ours = [multi.result(0).coherence, multi.result(1).coherence];
    const script = `import json,sys,numpy as np
v=json.load(sys.stdin); X=[np.array(v['x1']),np.array(v['x2'])]; N=${N}; P=${(stride * N) / 2}
w=0.5-0.5*np.cos(2*np.pi*np.arange(N)/N)
K=2; B=N//2+1
def coherence(Y):
    Sxx=np.zeros((B,K,K),complex); Sxy=np.zeros((B,K),complex); Syy=np.zeros(B)
    s=0
    while s+N<=len(Y):
        F=[np.fft.rfft(x[s:s+N]*w) for x in X]; G=np.fft.rfft(Y[s:s+N]*w)
        for a in range(K):
            Sxy[:,a]+=np.conj(F[a])*G
            for b in range(K): Sxx[:,a,b]+=np.conj(F[a])*F[b]
        Syy+=np.abs(G)**2; s+=P
    C=np.zeros(B)
    for f in range(1,B-1):
        z=np.linalg.solve(Sxx[f],Sxy[f]); C[f]=np.real(np.vdot(Sxy[f],z))/Syy[f]
    return C.tolist()
print(json.dumps({'C':[coherence(np.array(v['y'])),coherence(np.array(v['d']))]}))`;
    const r = spawnSync('python3', ['-c', script], { input: JSON.stringify({ x1: Array.from(x), x2: Array.from(x2), y: Array.from(y), d: Array.from(d) }), encoding: 'utf8', maxBuffer: 1 << 26 });
    expect(r.status, r.stderr).toBe(0);
    const ref = JSON.parse(r.stdout) as { C: number[][] };
    for (let m = 0; m < 2; m++) {
      let worst = 0;
      for (let k = 1; k < ref.C[m]!.length - 1; k++) worst = Math.max(worst, Math.abs(ref.C[m]![k]! - ours[m]![k]!));
      expect(worst).toBeLessThan(1e-9);
    }
    // Where both references have energy, the first alone explains much less of y than both.
    const single = new WelchMultiCross(N, fs, stride, 1);
    single.push([x], [y], n);
    const one = single.result();
    const band = (c: Float64Array) => bandBounds({ ...one, coherence: c }, fs).find((b) => b.centreHz === 1000)!.boundDb!;
    expect(band(ours[0]!)).toBeGreaterThan(band(one.coherence) + 10);
  });

  it("replay's stride leaves at least 128 segments where it can, never overlapping ones, at most every 16th", () => {
    const N = 2048;
    expect(replaySpectrumStride(100 * N, N)).toBe(2); // 200 half-overlapping segments: every other
    expect(replaySpectrumStride(40 * 16000, N)).toBe(4); // the demo: 625 of them, every 4th
    const hour = 3600 * 48000;
    expect(replaySpectrumStride(hour, 8192)).toBe(16);
    const k = replaySpectrumStride(300 * 48000, 8192);
    expect(Math.floor((2 * 300 * 48000) / 8192 / k)).toBeGreaterThanOrEqual(128);
  });

  it('a linear path with independent white noise: the band bound is 10 log10(1 + SNR) of that band', () => {
    // White reference, flat path of gain g, white noise: C = g^2 sx^2 / (g^2 sx^2 + sv^2) at every
    // frequency, so the bound is 10 log10(1 + g^2 sx^2 / sv^2) = 20 dB here, in every band.
    const m = 400_000;
    const xs = white(m, 0.5, 611);
    const v = white(m, 0.05, 612);
    const ds = Float64Array.from(xs, (s, i) => 0.1 * s + v[i]!);
    const c = new WelchCross(1024, fs);
    c.push(xs, ds, m);
    const bands = bandBounds(c.result(), fs);
    expect(bands.map((b) => b.centreHz)).toEqual(octaveBands(fs).map((b) => b.centreHz));
    const expected = 10 * Math.log10(1 + (0.1 * 0.5) ** 2 / 0.05 ** 2);
    // The estimate's bias for K averaged segments is about (1 - C)^2 / K (Bendat & Piersol 9.2.3):
    // far below the 0.3 dB allowed here with K = 780.
    for (const b of bands.filter((b) => b.centreHz >= 125)) expect(Math.abs(b.boundDb! - expected)).toBeLessThan(0.3);
  });
});
