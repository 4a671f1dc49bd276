import { DelayLine } from './delayLine.js';
import {
  Q15,
  Q31,
  WideAccumulator,
  divRound,
  mulShift,
  quantize,
  saturate,
  scaleRound,
  type QFormat,
  type Rounding,
} from './fixed.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from './types.js';

/**
 * The bit-exact fixed-point reference kernels (q15: 16-bit data and weights; q31: 32-bit).
 * DEVELOPERS.md ("Fixed-point operator sequence") states the exact sequence of operations;
 * any faster kernel must reproduce these results bit for bit.
 *
 * Registers: data, weights, error and update gain g are (f+1)-bit Qf values that saturate on
 * every store; the FIR sum is exact (a wide accumulator) and rounded once; the normalized step
 * s is Q16 in a 32-bit register; the reference energy E is Q30 and exact. With K references
 * (spec.references, samples interleaved) the same sequence runs per reference: each is
 * quantized and pushed on its own line, the FIR sum runs over all K filters before its one
 * rounding, E is all K lines' energy, and the update and mean removal go reference by reference.
 */

const STEP_FRAC = 16;
const ENERGY_FRAC = 30;
const INT32_MAX = 2147483647;

/** The Q format of a fixed-point arithmetic, or null for a floating-point one. */
export function formatOf(arithmetic: string): QFormat | null {
  return arithmetic === 'q15' ? Q15 : arithmetic === 'q31' ? Q31 : null;
}

/**
 * The spec's real-valued constants in the registers the operator sequence uses (DEVELOPERS.md):
 * the Q16 step, the Q30 regularization, the Qf leak, and the per-sample leak factor
 * lfQ = rnd_16(muQ gammaQ) (Qf), formed once from the unnormalized step.
 */
export function fixedConstants(spec: AdaptiveSpec, fmt: QFormat): { muQ: number; deltaQ: number; gammaQ: number; lfQ: number } {
  const muQ = Math.round(spec.step * 2 ** STEP_FRAC);
  const gammaQ = Math.round(spec.leak * 2 ** fmt.fracBits);
  return {
    muQ,
    deltaQ: Math.max(1, Math.round(spec.delta * 2 ** ENERGY_FRAC)),
    gammaQ,
    // step * leak < 1 (config), so this never needs saturating.
    lfQ: gammaQ === 0 ? 0 : saturate(mulShift(muQ, gammaQ, STEP_FRAC, spec.rounding), fmt),
  };
}

const lines = (K: number, L: number) => Array.from({ length: K }, () => new DelayLine(L, (n) => new Float64Array(n)));

function requireFormat(arithmetic: string): QFormat {
  const fmt = formatOf(arithmetic);
  if (fmt === null) throw new RangeError(`not a fixed-point arithmetic: ${arithmetic}`);
  return fmt;
}

/** Exact FIR sum of weights and samples, rounded to the format; counts a clip in `sat`. */
class Dot {
  private readonly acc = new WideAccumulator();
  clipped = false;

  constructor(
    private readonly fmt: QFormat,
    private readonly rounding: Rounding,
  ) {}

  /**
   * The sum over every reference's filter and line (reference k's taps at w[k L ..]), exact,
   * rounded once: one reference is the plain FIR sum.
   */
  compute(w: Float64Array, lines: readonly DelayLine<Float64Array>[], L: number): number {
    const f = this.fmt.fracBits;
    let raw: number;
    if (f === 15) {
      // 16 x 16-bit products are below 2^30: a double sums 2^23 of them exactly.
      let acc = 0;
      for (let r = 0; r < lines.length; r++) {
        const { buf, pos: p } = lines[r]!;
        const o = r * L;
        for (let k = 0; k < L; k++) acc += w[o + k]! * buf[p + k]!;
      }
      raw = this.rounding === 'nearest' ? Math.floor((acc + 16384) / 32768) : Math.floor(acc / 32768);
    } else {
      const a = this.acc;
      a.clear();
      for (let r = 0; r < lines.length; r++) {
        const { buf, pos: p } = lines[r]!;
        const o = r * L;
        for (let k = 0; k < L; k++) a.add(buf[p + k]!, w[o + k]!);
      }
      raw = a.result(f, this.rounding);
    }
    const v = saturate(raw, this.fmt);
    this.clipped = v !== raw;
    return v;
  }
}

/**
 * Stores into a format's registers: saturating, counting every clip, apart for weights (the drift
 * symptom) and for signals (inputs, outputs, error, gain: a level problem).
 */
class Registers {
  signalSaturations = 0;
  weightSaturations = 0;
  readonly scale: number;

  constructor(
    readonly fmt: QFormat,
    readonly rounding: Rounding,
  ) {
    this.scale = 2 ** -fmt.fracBits;
  }

  /** A signal store. */
  clip(v: number): number {
    const s = saturate(v, this.fmt);
    if (s !== v) this.signalSaturations++;
    return s;
  }

  /** A weight store. */
  clipWeight(v: number): number {
    const s = saturate(v, this.fmt);
    if (s !== v) this.weightSaturations++;
    return s;
  }

  /** A real value quantized to the format (a signal store). */
  q(v: number): number {
    return this.clip(scaleRound(v, this.fmt.fracBits, this.rounding));
  }
}

export class FixedAdaptiveKernel implements AdaptiveKernel {
  adapting = true;
  private readonly regs: Registers;
  private readonly fmt: QFormat;
  private readonly scale: number;
  private readonly W: Float64Array;
  /** One line per reference (spec.references): the un-noised ones filter, the noised ones adapt. */
  private readonly evalLines: DelayLine<Float64Array>[];
  private readonly adaptLines: DelayLine<Float64Array>[];
  private readonly K: number;
  private readonly dot: Dot;
  private muQ: number;
  private deltaQ: number;
  private lfQ: number;
  private energy = 0;
  private sinceMeanRemoval = 0;

  constructor(public spec: AdaptiveSpec) {
    this.fmt = requireFormat(spec.arithmetic);
    this.regs = new Registers(this.fmt, spec.rounding);
    this.scale = this.regs.scale;
    this.K = spec.references ?? 1;
    this.W = new Float64Array(this.K * spec.taps);
    this.evalLines = lines(this.K, spec.taps);
    this.adaptLines = lines(this.K, spec.taps);
    this.dot = new Dot(this.fmt, spec.rounding);
    ({ muQ: this.muQ, deltaQ: this.deltaQ, lfQ: this.lfQ } = fixedConstants(spec, this.fmt));
  }

  /** One sample's share of the Q30 energy: x^2 rescaled from Q(2f) to Q30. */
  private energyTerm(v: number): number {
    const shift = 2 * this.fmt.fracBits - ENERGY_FRAC;
    return shift === 0 ? v * v : mulShift(v, v, shift, this.spec.rounding);
  }

  get weightSaturations(): number {
    return this.regs.weightSaturations;
  }

  get signalSaturations(): number {
    return this.regs.signalSaturations;
  }

  private clip(v: number): number {
    return this.regs.clip(v);
  }

  private q(v: number): number {
    return this.regs.q(v);
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
    const { taps: L, algorithm, leakShift, meanRemovalEvery, rounding } = this.spec;
    const { K, W, dot, evalLines } = this;
    const f = this.fmt.fracBits;
    const on = noise === null ? evalLines : this.adaptLines;
    for (let n = start; n < end; n++) {
      // Each reference quantized and pushed; the energy of all of them kept exactly.
      for (let r = 0; r < K; r++) {
        const xq = this.q(x[n * K + r]!);
        let old = evalLines[r]!.push(xq);
        if (noise !== null) old = this.adaptLines[r]!.push(this.clip(xq + this.q(noise[n * K + r]!)));
        const line = on[r]!;
        this.energy += this.energyTerm(line.buf[line.pos]!) - this.energyTerm(old);
      }
      const dq = this.q(d[n]!);

      const yEval = dot.compute(W, evalLines, L);
      if (dot.clipped) this.regs.signalSaturations++;
      const eEval = this.clip(dq - yEval);
      y[n] = yEval * this.scale;
      e[n] = eEval * this.scale;
      if (!this.adapting) continue;

      let err = eEval;
      if (noise !== null) {
        const yA = dot.compute(W, on, L);
        if (dot.clipped) this.regs.signalSaturations++;
        err = this.clip(dq - yA);
      }
      const s =
        algorithm === 'nlms'
          ? Math.min(INT32_MAX, divRound(this.muQ * 2 ** ENERGY_FRAC, this.deltaQ + this.energy, rounding))
          : this.muQ;
      const g = this.clip(mulShift(s, err, STEP_FRAC, rounding));
      const lf = this.lfQ;
      for (let r = 0; r < K; r++) {
        const { buf, pos: p } = on[r]!;
        const o = r * L;
        for (let k = 0; k < L; k++) {
          const wk = W[o + k]!;
          let v = wk + mulShift(g, buf[p + k]!, f, rounding);
          if (lf !== 0) v -= mulShift(lf, wk, f, rounding);
          if (leakShift !== null) v -= Math.floor(wk / 2 ** leakShift);
          W[o + k] = this.regs.clipWeight(v);
        }
      }
      // Each reference's filter loses its own mean.
      if (meanRemovalEvery !== null && ++this.sinceMeanRemoval >= meanRemovalEvery) {
        this.sinceMeanRemoval = 0;
        for (let r = 0; r < K; r++) {
          const o = r * L;
          let sum = 0;
          for (let k = 0; k < L; k++) sum += W[o + k]!;
          const m = divRound(sum, L, rounding);
          for (let k = 0; k < L; k++) W[o + k] = this.regs.clipWeight(W[o + k]! - m);
        }
      }
    }
  }

  getWeights(): Float64Array {
    return this.W.map((v) => v * this.scale);
  }

  readWeights(out: Float64Array): void {
    for (let k = 0; k < this.W.length; k++) out[k] = this.W[k]! * this.scale;
  }

  setWeights(w: ArrayLike<number>): void {
    for (let k = 0; k < this.W.length; k++) this.W[k] = this.regs.clipWeight(scaleRound(w[k] ?? 0, this.fmt.fracBits, this.spec.rounding));
  }

  /** The raw integer weights (Qf). */
  rawWeights(): Float64Array {
    return Float64Array.from(this.W);
  }

  copyTo(fir: FirKernel): void {
    fir.setWeights(this.getWeights());
  }

  reset(): void {
    this.W.fill(0);
    for (const l of [...this.evalLines, ...this.adaptLines]) l.clear();
    this.energy = 0;
    this.sinceMeanRemoval = 0;
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.W, this.scale, out);
  }

  retune(spec: AdaptiveSpec): void {
    this.spec = spec;
    ({ muQ: this.muQ, deltaQ: this.deltaQ, lfQ: this.lfQ } = fixedConstants(spec, this.fmt));
  }
}

export class FixedFirKernel implements FirKernel {
  private readonly regs: Registers;
  private readonly fmt: QFormat;
  private readonly scale: number;
  private readonly W: Float64Array;
  private readonly lines: DelayLine<Float64Array>[];
  private readonly dot: Dot;

  constructor(private readonly spec: AdaptiveSpec) {
    this.fmt = requireFormat(spec.arithmetic);
    this.regs = new Registers(this.fmt, spec.rounding);
    this.scale = this.regs.scale;
    const K = spec.references ?? 1;
    this.W = new Float64Array(K * spec.taps);
    this.lines = lines(K, spec.taps);
    this.dot = new Dot(this.fmt, spec.rounding);
  }

  get taps(): number {
    return this.W.length;
  }

  get signalSaturations(): number {
    return this.regs.signalSaturations;
  }

  run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const K = this.lines.length;
    const L = this.spec.taps;
    for (let n = start; n < end; n++) {
      const regs = this.regs;
      for (let r = 0; r < K; r++) this.lines[r]!.push(regs.q(x[n * K + r]!));
      const v = this.dot.compute(this.W, this.lines, L);
      if (this.dot.clipped) regs.signalSaturations++;
      y[n] = v * this.scale;
      e[n] = regs.clip(regs.q(d[n]!) - v) * this.scale;
    }
  }

  getWeights(): Float64Array {
    return this.W.map((v) => v * this.scale);
  }

  setWeights(w: ArrayLike<number>): void {
    for (let k = 0; k < this.W.length; k++) this.W[k] = quantize(w[k] ?? 0, this.fmt, this.spec.rounding);
  }

  copyWeightsFrom(other: FirKernel): void {
    this.setWeights(other.getWeights());
  }

  copyHistoryFrom(other: FirKernel): void {
    this.lines.forEach((l, r) => l.copyFrom((other as FixedFirKernel).lines[r]!));
  }

  reset(): void {
    this.W.fill(0);
    for (const l of this.lines) l.clear();
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.W, this.scale, out);
  }
}
