import { DelayLine } from './delayLine.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from './types.js';

/**
 * The float64 reference kernels: everything in doubles. (float32, a single-precision target, has
 * its own operator sequence in float32Kernel.ts.) They take K references (spec.references) as the
 * multiple-input transversal filter (Haykin, Adaptive Filter Theory, the multiple-input form of
 * LMS; Rey Vega & Rey, NLMS): one L-tap filter per reference, one output
 * y(n) = sum_k w_k . x_k(n) and one error, the NLMS step normalized by the energy of all K
 * regressors together, delta + sum_k ||x_k(n)||^2. The samples come interleaved: x[n K + k] is
 * reference k at sample n (and so is the injected noise); the weights are the references'
 * filters one after another, reference k's taps at [k L, (k + 1) L). With one reference this is
 * the plain transversal filter the fast kernels reproduce bit for bit.
 */

const lines = <T extends Float64Array | Float32Array>(K: number, L: number, make: (n: number) => T) => Array.from({ length: K }, () => new DelayLine(L, make));
const f64 = (n: number) => new Float64Array(n);

export class FloatAdaptiveKernel implements AdaptiveKernel {
  adapting = true;
  weightSaturations = 0;
  readonly signalSaturations = 0;
  private readonly K: number;
  private readonly w: Float64Array;
  private readonly evalLines: DelayLine<Float64Array>[];
  private readonly adaptLines: DelayLine<Float64Array>[];
  private sinceMeanRemoval = 0;

  constructor(public spec: AdaptiveSpec) {
    this.K = spec.references ?? 1;
    this.w = new Float64Array(this.K * spec.taps);
    this.evalLines = lines(this.K, spec.taps, f64);
    this.adaptLines = lines(this.K, spec.taps, f64);
  }

  run(x: Float64Array, d: Float64Array, noise: Float64Array | null, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const { taps: L, algorithm, step, delta, leak, leakShift, meanRemovalEvery, weightLimit } = this.spec;
    const { K, w, evalLines, adaptLines } = this;
    const c = step * leak + (leakShift === null ? 0 : 2 ** -leakShift);
    const nlms = algorithm === 'nlms';
    for (let n = start; n < end; n++) {
      const dn = d[n]!;
      let accEval = 0;
      for (let k = 0; k < K; k++) {
        const xv = x[n * K + k]!;
        const line = evalLines[k]!;
        line.push(xv);
        if (noise !== null) adaptLines[k]!.push(xv + noise[n * K + k]!);
        const buf = line.buf;
        const p = line.pos;
        const o = k * L;
        for (let j = 0; j < L; j++) accEval += w[o + j]! * buf[p + j]!;
      }
      y[n] = accEval;
      e[n] = dn - accEval;
      if (!this.adapting) continue;
      const on = noise === null ? evalLines : adaptLines;
      let acc = accEval;
      let energy = 0;
      if (noise !== null || nlms) {
        acc = 0;
        for (let k = 0; k < K; k++) {
          const buf = on[k]!.buf;
          const p = on[k]!.pos;
          const o = k * L;
          for (let j = 0; j < L; j++) {
            const v = buf[p + j]!;
            acc += w[o + j]! * v;
            energy += v * v;
          }
        }
      }
      const err = dn - acc;
      const norm = delta + energy;
      const mu = nlms ? (norm > 0 ? step / norm : 0) : step;
      const g = mu * err;
      for (let k = 0; k < K; k++) {
        const buf = on[k]!.buf;
        const p = on[k]!.pos;
        const o = k * L;
        for (let j = 0; j < L; j++) {
          let v = w[o + j]! - c * w[o + j]! + g * buf[p + j]!;
          if (!(v <= weightLimit && v >= -weightLimit)) {
            v = v > 0 ? weightLimit : v < 0 ? -weightLimit : 0;
            this.weightSaturations++;
          }
          w[o + j] = v;
        }
      }
      // Each reference's filter has its own unexcited directions: its own mean comes off.
      if (meanRemovalEvery !== null && ++this.sinceMeanRemoval >= meanRemovalEvery) {
        this.sinceMeanRemoval = 0;
        for (let k = 0; k < K; k++) {
          const o = k * L;
          let sum = 0;
          for (let j = 0; j < L; j++) sum += w[o + j]!;
          const m = sum / L;
          for (let j = 0; j < L; j++) w[o + j] = w[o + j]! - m;
        }
      }
    }
  }

  getWeights(): Float64Array {
    return Float64Array.from(this.w);
  }

  readWeights(out: Float64Array): void {
    out.set(this.w);
  }

  setWeights(w: ArrayLike<number>): void {
    for (let k = 0; k < this.w.length; k++) this.w[k] = w[k] ?? 0;
  }

  copyTo(fir: FirKernel): void {
    fir.setWeights(this.w);
  }

  reset(): void {
    this.w.fill(0);
    for (const l of [...this.evalLines, ...this.adaptLines]) l.clear();
    this.sinceMeanRemoval = 0;
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.w, 1, out);
  }

  retune(spec: AdaptiveSpec): void {
    this.spec = spec;
  }
}

/** The float64 clean-path FIR (K references, as above); float32Kernel.ts derives its binary32 one from it (storage, run). */
export class FloatFirKernel implements FirKernel {
  readonly signalSaturations = 0;
  protected readonly K: number;
  protected readonly L: number;
  protected readonly w: Float64Array | Float32Array;
  protected readonly lines: DelayLine<Float64Array | Float32Array>[];

  constructor(spec: AdaptiveSpec, single = false) {
    this.K = spec.references ?? 1;
    this.L = spec.taps;
    this.w = single ? new Float32Array(this.K * spec.taps) : new Float64Array(this.K * spec.taps);
    this.lines = lines<Float64Array | Float32Array>(this.K, spec.taps, (n) => (single ? new Float32Array(n) : new Float64Array(n)));
  }

  get taps(): number {
    return this.w.length;
  }

  run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const { K, L, w } = this;
    for (let n = start; n < end; n++) {
      let acc = 0;
      for (let k = 0; k < K; k++) {
        const line = this.lines[k]!;
        line.push(x[n * K + k]!);
        const buf = line.buf;
        const p = line.pos;
        const o = k * L;
        for (let j = 0; j < L; j++) acc += w[o + j]! * buf[p + j]!;
      }
      y[n] = acc;
      e[n] = d[n]! - acc;
    }
  }

  getWeights(): Float64Array {
    return Float64Array.from(this.w);
  }

  setWeights(w: ArrayLike<number>): void {
    for (let k = 0; k < this.w.length; k++) this.w[k] = w[k] ?? 0;
  }

  copyWeightsFrom(other: FirKernel): void {
    this.setWeights(other.getWeights());
  }

  copyHistoryFrom(other: FirKernel): void {
    const o = other as FloatFirKernel;
    this.lines.forEach((l, k) => l.copyFrom(o.lines[k]!));
  }

  reset(): void {
    this.w.fill(0);
    for (const l of this.lines) l.clear();
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.w, 1, out);
  }
}
