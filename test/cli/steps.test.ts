import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { EigenvalueDecomposition, Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { createAdaptiveKernel } from '../../src/dsp/kernels.js';
import { WavWriter } from '../../src/io/wav/writer.js';
import { bandLimited, spec, through, white } from '../helpers/signals.js';
import { cli, sox, tmpDir } from '../helpers/tools.js';
import { writeFileSync } from 'node:fs';

// LMS step bounds on a recording (README "Step bounds"): mean convergence needs
// mu < 2/(lambda_max + gamma) (Haykin, Adaptive Filter Theory, 4th ed., ch. 5); the mean square
// stays bounded for mu < 2/tr(R) (Kuo, Lee & Tian, Real-Time DSP, eq. 8.3.5; Rey Vega & Rey,
// eq. 4.106), and for Gaussian input mu < 2/(3 tr R) (Horowitz & Senne 1981, recalled from
// memory). tapwarden refuses mu >= 2/tr(R + gamma I) and warns above 2/(3 tr(R + gamma I)).

const RATE = 8000;
const L = 64;
const dir = tmpDir();
// 20 s: a quiet first 10 s (-40 dB) and a loud second half (-14 dB): the bounds must come
// from the loud half (the old check read the first 10 s only).
const n = 20 * RATE;
const x = bandLimited(n, 0.02, 0.3, 0.2, 701);
for (let i = 0; i < n / 2; i++) x[i]! *= 0.05;
const d = through(Array.from({ length: 24 }, (_, k) => 0.5 * 0.8 ** k * Math.cos(0.9 * k)), x, white(n, 0.003, 702));
const wav = join(dir, 'steps.wav');
const w = new WavWriter(wav, RATE, 2, 'float32');
w.write([x, d], n);
w.close();

/** tr R and lambda_max of the 64 x 64 R of the loud half, from SoX's decode of the reference, eigenvalues by ml-matrix. */
function outside(): { trace: number; lambdaMax: number } {
  const raw = join(dir, 'ref.f64');
  sox(wav, '-t', 'raw', '-e', 'floating-point', '-b', '64', '-L', raw, 'remix', '1', 'trim', '10');
  const b = readFileSync(raw);
  const v = new Float64Array(b.buffer, b.byteOffset, b.length / 8);
  const r = Array.from({ length: L }, (_, k) => {
    let acc = 0;
    for (let i = k; i < v.length; i++) acc += v[i]! * v[i - k]!;
    return acc / v.length;
  });
  const R = new Matrix(Array.from({ length: L }, (_, i) => Array.from({ length: L }, (_, j) => r[Math.abs(i - j)]!)));
  return { trace: L * r[0]!, lambdaMax: Math.max(...new EigenvalueDecomposition(R, { assumeSymmetric: true }).realEigenvalues) };
}

const { trace, lambdaMax } = outside();
const config = (step: number) => {
  const f = join(dir, `lms-${step}.yaml`);
  writeFileSync(f, `filter:\n  algorithm: lms\n  taps: ${L}\n  step: ${step}\n`);
  return f;
};

describe('LMS step bounds from the recording', () => {
  it('refuses a step at the mean-square bound 2/tr R, naming both bounds and the figures (checked against ml-matrix on SoX decode)', () => {
    expect(2 / lambdaMax).toBeGreaterThan(1.5 * (2 / trace)); // a real gap between the bounds
    const step = 1.001 * (2 / trace);
    const r = cli(['replay', wav, '--config', config(step), '--out', join(dir, 'refused')]);
    expect(r.status).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    const m = /below the LMS mean-square bound 2\/tr\(R \+ leak I\) = ([\d.e+-]+) \(mean convergence alone needs below 2\/\(lambda_max \+ leak\) = ([\d.e+-]+)\); tr R = ([\d.e+-]+) .*lambda_max = ([\d.e+-]+), over the loudest 10\.0 s of the reference, from 10\.0 s \[TW_ERR_CONFIG_STEP_BOUND\]$/.exec(r.stderr.trim());
    expect(m, r.stderr).not.toBeNull();
    const [, bound, meanBound, tr, lmax] = m!.map(Number);
    expect(Math.abs(tr! / trace - 1)).toBeLessThan(1e-3);
    expect(Math.abs(lmax! / lambdaMax - 1)).toBeLessThan(1e-3);
    expect(Math.abs(bound! / (2 / trace) - 1)).toBeLessThan(1e-3);
    expect(Math.abs(meanBound! / (2 / lambdaMax) - 1)).toBeLessThan(1e-3);
  });

  it('a step just above the mean bound 2/lambda_max is refused (it is far beyond the mean-square one)', () => {
    const r = cli(['replay', wav, '--config', config(1.0001 * (2 / lambdaMax)), '--out', join(dir, 'above-mean')]);
    expect(r.status).toBe(2);
    expect(r.stderr).toMatch(/TW_ERR_CONFIG_STEP_BOUND/);
  });

  it('warns between 2/(3 tr R) and 2/tr R, and runs', () => {
    const r = cli(['replay', wav, '--config', config(0.6 * (2 / trace)), '--out', join(dir, 'warned')]);
    expect(r.status).toBe(0);
    expect(r.stderr).toMatch(/^tapwarden: warning: .*filter\.step = [\d.e+-]+ is above 2\/\(3 tr\(R \+ leak I\)\) = [\d.e+-]+, the mean-square bound for Gaussian input .*\[TW_WARN_STEP\]$/m);
    expect(cli(['replay', wav, '--config', config(0.2 * (2 / trace)), '--out', join(dir, 'quiet')]).stderr).toBe('');
  });

  it('what the old check accepted diverges: LMS at the middle of [2/tr R, 2/lambda_max) saturates, below 2/(3 tr R) it converges', () => {
    const loud = { x: x.subarray(n / 2), d: d.subarray(n / 2) };
    const run = (step: number) => {
      const k = createAdaptiveKernel(spec({ taps: L, step, weightLimit: 1e6 }));
      const y = new Float64Array(loud.x.length);
      const e = new Float64Array(loud.x.length);
      k.run(loud.x, loud.d, null, y, e, 0, loud.x.length);
      return k.weightSaturations;
    };
    expect(run(0.5 * (2 / trace + 2 / lambdaMax))).toBeGreaterThan(0);
    expect(run(0.5 * (2 / (3 * trace)))).toBe(0);
  });
});

describe('LMS step bounds with two references (the stacked regressor)', () => {
  // A second reference on channel 2, loud throughout; the desired hears both.
  const x2 = bandLimited(n, 0.05, 0.45, 0.15, 703);
  const d2 = through([0.3, -0.2, 0.1], x2, d);
  const two = join(dir, 'two.wav');
  const tw = new WavWriter(two, RATE, 3, 'float32');
  tw.write([x, d2, x2], n);
  tw.close();
  const half = 8; // taps per reference: a 16 x 16 stacked R keeps ml-matrix quick
  const cfg = (step: number) => {
    const f = join(dir, `two-${step}.yaml`);
    writeFileSync(f, `input:\n  referenceChannels: [0, 2]\n  desiredChannel: 1\nfilter:\n  algorithm: lms\n  taps: ${half}\n  step: ${step}\n`);
    return f;
  };

  it('refuses at 2/tr R of the stacked R (its trace from SoX decode, its eigenvalues from ml-matrix) and prints a lambda_max bound above the true one', () => {
    // The loudest 10 s of each reference: the second half of channel 0, the whole of channel 2's
    // first 10 s (it is stationary: any 10 s give the same power).
    const decode = (channel: number, from: number) => {
      const raw = join(dir, `two-${channel}.f64`);
      sox(two, '-t', 'raw', '-e', 'floating-point', '-b', '64', '-L', raw, 'remix', String(channel + 1), 'trim', String(from), '10');
      const b = readFileSync(raw);
      return new Float64Array(b.buffer, b.byteOffset, b.length / 8);
    };
    const u = [decode(0, 10), decode(2, 0)];
    // Each reference's own R block on its own stretch (as tapwarden scans them) gives the trace.
    const power = u.map((v) => v.reduce((a, s) => a + s * s, 0) / v.length);
    const trace = half * (power[0]! + power[1]!);
    // The stacked R over the same stretches, cross blocks included, for the true lambda_max.
    const m = Math.min(u[0]!.length, u[1]!.length);
    const R = Matrix.zeros(2 * half, 2 * half);
    for (let a = 0; a < 2; a++)
      for (let b = 0; b < 2; b++)
        for (let i = 0; i < half; i++)
          for (let j = 0; j < half; j++) {
            let acc = 0;
            for (let t = half; t < m; t++) acc += u[a]![t - i]! * u[b]![t - j]!;
            R.set(a * half + i, b * half + j, acc / (m - half));
          }
    const lambdaTrue = Math.max(...new EigenvalueDecomposition(R, { assumeSymmetric: true }).realEigenvalues);
    const r = cli(['replay', two, '--config', cfg(1.001 * (2 / trace)), '--out', join(dir, 'two-refused')]);
    expect(r.status).toBe(2);
    const got = /= ([\d.e+-]+) \(mean convergence.*tr R = ([\d.e+-]+) \(8 taps x the 2 references' powers .*lambda_max <= ([\d.e+-]+) \(their lambda_max summed\).*\[TW_ERR_CONFIG_STEP_BOUND\]$/.exec(r.stderr.trim());
    expect(got, r.stderr).not.toBeNull();
    const [, bound, tr, lmax] = got!.map(Number);
    expect(Math.abs(tr! / trace - 1)).toBeLessThan(1e-3);
    expect(Math.abs(bound! / (2 / trace) - 1)).toBeLessThan(1e-3);
    expect(lmax!).toBeGreaterThanOrEqual(0.999 * lambdaTrue);
    const ok = cli(['replay', two, '--config', cfg(0.2 * (2 / trace)), '--out', join(dir, 'two-ok')]);
    expect(ok.status, ok.stderr).toBe(0);
    expect(ok.stderr).toBe('');
  });
});
