import { DelayLine } from './delayLine.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from './types.js';

/**
 * The float64 reference kernels: everything in doubles. (float32, a single-precision target, has
 * its own operator sequence in float32Kernel.ts.)
 */

export class FloatAdaptiveKernel implements AdaptiveKernel {
  adapting = true;
  weightSaturations = 0;
  /** Floating-point signal stores never clip (inputs are range-checked by the engine). */
  readonly signalSaturations = 0;
  private readonly w: Float64Array;
  private readonly adaptLine: DelayLine<Float64Array>;
  private readonly evalLine: DelayLine<Float64Array>;
  private sinceMeanRemoval = 0;

  constructor(public spec: AdaptiveSpec) {
    this.w = new Float64Array(spec.taps);
    this.adaptLine = new DelayLine(spec.taps, (n) => new Float64Array(n));
    this.evalLine = new DelayLine(spec.taps, (n) => new Float64Array(n));
  }

  run(
    x: Float64Array,
    d: Float64Array,
    noise: Float64Array | null,
    y: Float64Array,
    e: Float64Array,
    start: number,
    end: number,
  ): void {
    const { taps: L, algorithm, step, delta, leak, leakShift, meanRemovalEvery, weightLimit } = this.spec;
    const w = this.w;
    // The leak uses the unnormalized step, so a silent reference cannot make it diverge.
    const c = step * leak + (leakShift === null ? 0 : 2 ** -leakShift);
    const nlms = algorithm === 'nlms';
    for (let n = start; n < end; n++) {
      const xn = x[n]!;
      const dn = d[n]!;
      this.evalLine.push(xn);
      const ev = this.evalLine.buf;
      const ep = this.evalLine.pos;
      let line = ev;
      let p = ep;
      if (noise !== null) {
        this.adaptLine.push(xn + noise[n]!);
        line = this.adaptLine.buf;
        p = this.adaptLine.pos;
      }
      // Output of the current weights on the un-noised reference.
      let accEval = 0;
      for (let k = 0; k < L; k++) accEval += w[k]! * ev[ep + k]!;
      y[n] = accEval;
      e[n] = dn - accEval;
      if (!this.adapting) continue;

      // The error the filter adapts on: on the noised reference when injecting noise.
      let acc = accEval;
      let energy = 0;
      if (line !== ev || nlms) {
        acc = 0;
        for (let k = 0; k < L; k++) {
          const v = line[p + k]!;
          acc += w[k]! * v;
          energy += v * v;
        }
      }
      const err = dn - acc;
      // A silent reference with delta = 0 has nothing to adapt on: no update, not 0/0.
      const norm = delta + energy;
      const mu = nlms ? (norm > 0 ? step / norm : 0) : step;
      const g = mu * err;
      for (let k = 0; k < L; k++) {
        let v = w[k]! - c * w[k]! + g * line[p + k]!;
        if (!(v <= weightLimit && v >= -weightLimit)) {
          v = v > 0 ? weightLimit : v < 0 ? -weightLimit : 0;
          this.weightSaturations++;
        }
        w[k] = v;
      }
      if (meanRemovalEvery !== null && ++this.sinceMeanRemoval >= meanRemovalEvery) {
        this.sinceMeanRemoval = 0;
        let sum = 0;
        for (let k = 0; k < L; k++) sum += w[k]!;
        const m = sum / L;
        for (let k = 0; k < L; k++) w[k] = w[k]! - m;
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
    fir.setWeights(this.getWeights());
  }

  reset(): void {
    this.w.fill(0);
    this.adaptLine.clear();
    this.evalLine.clear();
    this.sinceMeanRemoval = 0;
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.w, 1, out);
  }

  retune(spec: AdaptiveSpec): void {
    this.spec = spec;
  }
}

/** The float64 clean-path FIR; float32Kernel.ts derives its binary32 one from it (storage, run). */
export class FloatFirKernel implements FirKernel {
  readonly signalSaturations = 0;
  protected readonly w: Float64Array | Float32Array;
  protected readonly line: DelayLine<Float64Array | Float32Array>;

  constructor(spec: AdaptiveSpec, single = false) {
    this.w = single ? new Float32Array(spec.taps) : new Float64Array(spec.taps);
    this.line = new DelayLine<Float64Array | Float32Array>(spec.taps, (n) => (single ? new Float32Array(n) : new Float64Array(n)));
  }

  get taps(): number {
    return this.w.length;
  }

  run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const w = this.w;
    const L = w.length;
    for (let n = start; n < end; n++) {
      this.line.push(x[n]!);
      const buf = this.line.buf;
      const p = this.line.pos;
      let acc = 0;
      for (let k = 0; k < L; k++) acc += w[k]! * buf[p + k]!;
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
    this.line.copyFrom((other as FloatFirKernel).line);
  }

  reset(): void {
    this.w.fill(0);
    this.line.clear();
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.w, 1, out);
  }
}
