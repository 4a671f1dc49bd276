import { DelayLine } from './delayLine.js';
import { FloatFirKernel } from './floatKernel.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from './types.js';

/**
 * The float32 reference kernels: a single-precision target without fused multiply-add, summing
 * in tap order. Every product, sum, difference and quotient is rounded to binary32 (`f` below,
 * Math.fround: a double holds the exact product of two binary32 values, and rounding a double
 * sum or quotient of two binary32 values to binary32 gives the correctly rounded result, since
 * 53 >= 2 x 24 + 2; docs/REFERENCES.md "Floating point"). DEVELOPERS.md ("float32 operator
 * sequence") states the order; the generated C (`freeze`) follows it with `float` and
 * -ffp-contract=off and matches bit for bit.
 */
const f = Math.fround;

/** The spec's constants in binary32: step, delta, the leak factor c and the weight limit. */
export function float32Constants(spec: AdaptiveSpec): { mu: number; delta: number; c: number; limit: number } {
  let c = f(f(spec.step) * f(spec.leak));
  if (spec.leakShift !== null) c = f(c + 2 ** -spec.leakShift);
  return { mu: f(spec.step), delta: f(spec.delta), c, limit: f(spec.weightLimit) };
}

/** acc = f(acc + f(w[k] x[p+k])) for k = 0 .. L-1. */
function dot(w: Float32Array, buf: Float32Array, p: number, L: number): number {
  let acc = 0;
  for (let k = 0; k < L; k++) acc = f(acc + f(w[k]! * buf[p + k]!));
  return acc;
}

const line = (L: number) => new DelayLine(L, (n) => new Float32Array(n));

export class Float32AdaptiveKernel implements AdaptiveKernel {
  adapting = true;
  weightSaturations = 0;
  /** Floating-point signal stores never clip (inputs are range-checked by the engine). */
  readonly signalSaturations = 0;
  private readonly w: Float32Array;
  private readonly adaptLine: DelayLine<Float32Array>;
  private readonly evalLine: DelayLine<Float32Array>;
  private k: ReturnType<typeof float32Constants>;
  private sinceMeanRemoval = 0;

  constructor(public spec: AdaptiveSpec) {
    this.w = new Float32Array(spec.taps);
    this.adaptLine = line(spec.taps);
    this.evalLine = line(spec.taps);
    this.k = float32Constants(spec);
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
    const { taps: L, algorithm, meanRemovalEvery } = this.spec;
    const { mu, delta, c, limit } = this.k;
    const w = this.w;
    const nlms = algorithm === 'nlms';
    const fL = f(L);
    for (let n = start; n < end; n++) {
      const xn = f(x[n]!);
      const dn = f(d[n]!);
      this.evalLine.push(xn);
      const ev = this.evalLine.buf;
      const ep = this.evalLine.pos;
      let buf = ev;
      let p = ep;
      if (noise !== null) {
        this.adaptLine.push(f(xn + f(noise[n]!)));
        buf = this.adaptLine.buf;
        p = this.adaptLine.pos;
      }
      const yEval = dot(w, ev, ep, L);
      y[n] = yEval;
      e[n] = f(dn - yEval);
      if (!this.adapting) continue;

      const err = f(dn - (buf === ev ? yEval : dot(w, buf, p, L)));
      let step = mu;
      if (nlms) {
        let energy = 0;
        for (let k = 0; k < L; k++) energy = f(energy + f(buf[p + k]! * buf[p + k]!));
        const norm = f(delta + energy);
        // A silent reference with delta = 0 has nothing to adapt on: no update, not 0/0.
        step = norm > 0 ? f(mu / norm) : 0;
      }
      const g = f(step * err);
      for (let k = 0; k < L; k++) {
        const wk = w[k]!;
        let v = f(f(wk - f(c * wk)) + f(g * buf[p + k]!));
        if (!(v <= limit && v >= -limit)) {
          v = v > 0 ? limit : v < 0 ? -limit : 0;
          this.weightSaturations++;
        }
        w[k] = v;
      }
      if (meanRemovalEvery !== null && ++this.sinceMeanRemoval >= meanRemovalEvery) {
        this.sinceMeanRemoval = 0;
        let sum = 0;
        for (let k = 0; k < L; k++) sum = f(sum + w[k]!);
        const m = f(sum / fL);
        for (let k = 0; k < L; k++) w[k] = f(w[k]! - m);
      }
    }
  }

  getWeights(): Float64Array {
    return Float64Array.from(this.w);
  }

  readWeights(out: Float64Array): void {
    for (let k = 0; k < this.w.length; k++) out[k] = this.w[k]!;
  }

  setWeights(w: ArrayLike<number>): void {
    for (let k = 0; k < this.w.length; k++) this.w[k] = w[k] ?? 0;
  }

  copyTo(fir: FirKernel): void {
    fir.setWeights(this.w);
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
    this.k = float32Constants(spec);
  }
}

/** The clean-path FIR in binary32: FloatFirKernel's storage in Float32Array and this sequence. */
export class Float32FirKernel extends FloatFirKernel {
  constructor(spec: AdaptiveSpec) {
    super(spec, true);
  }

  override run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const w = this.w as Float32Array;
    const L = w.length;
    // One reference (the config allows no more in float32).
    const line = this.lines[0]!;
    for (let n = start; n < end; n++) {
      line.push(f(x[n]!));
      const yn = dot(w, line.buf as Float32Array, line.pos, L);
      y[n] = yn;
      e[n] = f(f(d[n]!) - yn);
    }
  }
}
