import { existsSync, readFileSync } from 'node:fs';
import { PACKAGE_ROOT } from '../../paths.js';
import { divRound, quantize, saturate, scaleRound, type QFormat } from '../fixed.js';
import { fixedConstants, formatOf } from '../fixedKernel.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from '../types.js';

/**
 * The fast kernels: hand-written WebAssembly (src/dsp/wasm/kernels.wat) behind the same
 * interfaces as the reference kernels. float64 uses 128-bit SIMD; q15 and q31 use scalar 64-bit
 * integers and reproduce the reference bit for bit. Samples are copied in and out a chunk at a
 * time; the weights and delay lines live in the module's memory.
 */

const WASM_FILE = new URL('dist/wasm/kernels.wasm', PACKAGE_ROOT);
const CHUNK = 1024;

interface Exports {
  memory: WebAssembly.Memory;
  setLayout(L: number, oW: number, oLE: number, oLA: number, oX: number, oD: number, oN: number, oY: number, oE: number): void;
  setFormat(f: number, nearest: number): void;
  reset(): void;
  getSat(): number;
  getSatW(): number;
  getPosE(): number;
  setPosE(p: number): void;
  f64Run(n: number, flags: number, mu: number, delta: number, leak: number, shiftc: number, lim: number): void;
  f64Flush(noise: number, lim: number): void;
  f64Rebound(): void;
  f64Fir(n: number): void;
  qRun(n: number, flags: number, muQ: bigint, deltaQ: bigint, lfQ: bigint, shift: number): void;
  qFlush(noise: number, shift: number): void;
  qFir(n: number): void;
}

let compiled: WebAssembly.Module | null | undefined;

/** The compiled module, or null when dist/wasm/kernels.wasm has not been built. */
function wasmModule(): WebAssembly.Module | null {
  if (compiled === undefined) compiled = existsSync(WASM_FILE) ? new WebAssembly.Module(readFileSync(WASM_FILE)) : null;
  return compiled;
}

export function fastKernelsAvailable(): boolean {
  return wasmModule() !== null;
}

/** Whether the fast kernels implement this spec: LMS and NLMS in float64, q15 and q31. */
export function hasFastKernel(spec: AdaptiveSpec): boolean {
  return (spec.algorithm === 'lms' || spec.algorithm === 'nlms') && spec.arithmetic !== 'float32' && fastKernelsAvailable();
}

/** One module instance laid out for an L-tap filter: weights, two delay lines, chunk buffers. */
class Instance {
  readonly x: Exports;
  readonly oW = 0;
  readonly oLE: number;
  readonly oLA: number;
  readonly oIO: number;

  constructor(readonly L: number, fixed: QFormat | null, rounding: string) {
    const mod = wasmModule();
    if (mod === null) throw new Error(`the fast kernels are not built (${WASM_FILE.pathname}); run npm run build`);
    this.x = new WebAssembly.Instance(mod).exports as unknown as Exports;
    const wBytes = ((fixed ? 4 : 8) * L + 15) & ~15;
    const lineBytes = ((fixed ? 4 : 8) * 2 * (L + 1) + 15) & ~15;
    this.oLE = wBytes;
    this.oLA = this.oLE + lineBytes;
    this.oIO = this.oLA + lineBytes;
    const total = this.oIO + 5 * 8 * CHUNK;
    const pages = Math.ceil(total / 65536) - this.x.memory.buffer.byteLength / 65536;
    if (pages > 0) this.x.memory.grow(pages);
    const io = (k: number) => this.oIO + k * 8 * CHUNK;
    this.x.setLayout(L, this.oW, this.oLE, this.oLA, io(0), io(1), io(2), io(3), io(4));
    if (fixed) this.x.setFormat(fixed.fracBits, rounding === 'nearest' ? 1 : 0);
  }

  f64(offset: number, n: number): Float64Array {
    return new Float64Array(this.x.memory.buffer, offset, n);
  }

  i32(offset: number, n: number): Int32Array {
    return new Int32Array(this.x.memory.buffer, offset, n);
  }

  io(k: number, n = CHUNK): Float64Array {
    return this.f64(this.oIO + k * 8 * CHUNK, n);
  }

  clearState(): void {
    new Uint8Array(this.x.memory.buffer, 0, this.oIO).fill(0);
    this.x.reset();
  }
}

export class WasmAdaptiveKernel implements AdaptiveKernel {
  adapting = true;
  private readonly inst: Instance;
  private readonly fmt: QFormat | null;
  private readonly scale: number;
  private readonly muQ: bigint;
  private readonly deltaQ: bigint;
  private readonly lfQ: bigint;
  private readonly shift: number;
  private readonly shiftc: number;
  private extraSat = 0;
  private sinceMeanRemoval = 0;
  private noiseOn = 0;

  constructor(readonly spec: AdaptiveSpec) {
    this.fmt = formatOf(spec.arithmetic);
    this.inst = new Instance(spec.taps, this.fmt, spec.rounding);
    this.scale = this.fmt ? 2 ** -this.fmt.fracBits : 1;
    const q = this.fmt ? fixedConstants(spec, this.fmt) : { muQ: 0, deltaQ: 0, lfQ: 0 };
    this.muQ = BigInt(q.muQ);
    this.deltaQ = BigInt(q.deltaQ);
    this.lfQ = BigInt(q.lfQ);
    this.shift = spec.leakShift ?? -1;
    this.shiftc = spec.leakShift === null ? 0 : 2 ** -spec.leakShift;
  }

  get weightSaturations(): number {
    return this.inst.x.getSatW() + this.extraSat;
  }

  get signalSaturations(): number {
    return this.inst.x.getSat();
  }

  run(x: Float64Array, d: Float64Array, noise: Float64Array | null, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const { inst, spec } = this;
    const every = spec.meanRemovalEvery;
    this.noiseOn = noise === null ? 0 : 1;
    const flags = (spec.algorithm === 'nlms' ? 1 : 0) | (noise === null ? 0 : 2) | (this.adapting ? 4 : 0);
    let i = start;
    while (i < end) {
      let n = Math.min(CHUNK, end - i);
      if (every !== null && this.adapting) n = Math.min(n, every - this.sinceMeanRemoval);
      inst.io(0, n).set(x.subarray(i, i + n));
      inst.io(1, n).set(d.subarray(i, i + n));
      if (noise !== null) inst.io(2, n).set(noise.subarray(i, i + n));
      if (this.fmt === null) inst.x.f64Run(n, flags, spec.step, spec.delta, spec.leak, this.shiftc, spec.weightLimit);
      else inst.x.qRun(n, flags, this.muQ, this.deltaQ, this.lfQ, this.shift);
      y.set(inst.io(3, n), i);
      e.set(inst.io(4, n), i);
      i += n;
      if (every !== null && this.adapting && (this.sinceMeanRemoval += n) >= every) {
        this.sinceMeanRemoval = 0;
        this.removeMean();
      }
    }
  }

  /** Applies the update still pending from the last sample. */
  private flush(): void {
    if (this.fmt === null) this.inst.x.f64Flush(this.noiseOn, this.spec.weightLimit);
    else this.inst.x.qFlush(this.noiseOn, this.shift);
  }

  private removeMean(): void {
    this.flush();
    const L = this.spec.taps;
    if (this.fmt === null) {
      const w = this.inst.f64(this.inst.oW, L);
      let sum = 0;
      for (let k = 0; k < L; k++) sum += w[k]!;
      const m = sum / L;
      for (let k = 0; k < L; k++) w[k] = w[k]! - m;
      this.inst.x.f64Rebound();
      return;
    }
    const W = this.inst.i32(this.inst.oW, L);
    let sum = 0;
    for (let k = 0; k < L; k++) sum += W[k]!;
    const m = divRound(sum, L, this.spec.rounding);
    for (let k = 0; k < L; k++) W[k] = this.clip(W[k]! - m);
  }

  private clip(v: number): number {
    const s = saturate(v, this.fmt!);
    if (s !== v) this.extraSat++;
    return s;
  }

  private view(): Float64Array | Int32Array {
    return this.fmt === null ? this.inst.f64(this.inst.oW, this.spec.taps) : this.inst.i32(this.inst.oW, this.spec.taps);
  }

  getWeights(): Float64Array {
    const out = new Float64Array(this.spec.taps);
    this.readWeights(out);
    return out;
  }

  readWeights(out: Float64Array): void {
    this.flush();
    const v = this.view();
    for (let k = 0; k < v.length; k++) out[k] = v[k]! * this.scale;
  }

  setWeights(w: ArrayLike<number>): void {
    this.flush();
    const v = this.view();
    for (let k = 0; k < v.length; k++) {
      v[k] = this.fmt === null ? (w[k] ?? 0) : this.clip(scaleRound(w[k] ?? 0, this.fmt.fracBits, this.spec.rounding));
    }
    if (this.fmt === null) this.inst.x.f64Rebound();
  }

  copyTo(fir: FirKernel): void {
    fir.setWeights(this.getWeights());
  }

  reset(): void {
    this.inst.clearState();
    this.sinceMeanRemoval = 0;
  }

  weightStats(out: WeightStats): WeightStats {
    this.flush();
    return statsOf(this.view(), this.scale, out);
  }
}

export class WasmFirKernel implements FirKernel {
  private readonly inst: Instance;
  private readonly fmt: QFormat | null;
  private readonly scale: number;

  constructor(private readonly spec: AdaptiveSpec) {
    this.fmt = formatOf(spec.arithmetic);
    this.inst = new Instance(spec.taps, this.fmt, spec.rounding);
    this.scale = this.fmt ? 2 ** -this.fmt.fracBits : 1;
  }

  get taps(): number {
    return this.spec.taps;
  }

  get signalSaturations(): number {
    return this.inst.x.getSat();
  }

  run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const inst = this.inst;
    for (let i = start; i < end; i += CHUNK) {
      const n = Math.min(CHUNK, end - i);
      inst.io(0, n).set(x.subarray(i, i + n));
      inst.io(1, n).set(d.subarray(i, i + n));
      if (this.fmt === null) inst.x.f64Fir(n);
      else inst.x.qFir(n);
      y.set(inst.io(3, n), i);
      e.set(inst.io(4, n), i);
    }
  }

  private view(): Float64Array | Int32Array {
    return this.fmt === null ? this.inst.f64(this.inst.oW, this.spec.taps) : this.inst.i32(this.inst.oW, this.spec.taps);
  }

  getWeights(): Float64Array {
    return Float64Array.from(this.view(), (w) => w * this.scale);
  }

  setWeights(w: ArrayLike<number>): void {
    const v = this.view();
    for (let k = 0; k < v.length; k++) v[k] = this.fmt === null ? (w[k] ?? 0) : quantize(w[k] ?? 0, this.fmt, this.spec.rounding);
  }

  copyWeightsFrom(other: FirKernel): void {
    this.setWeights(other.getWeights());
  }

  copyHistoryFrom(other: FirKernel): void {
    const src = (other as WasmFirKernel).inst;
    const bytes = this.inst.oLA - this.inst.oLE;
    new Uint8Array(this.inst.x.memory.buffer, this.inst.oLE, bytes).set(new Uint8Array(src.x.memory.buffer, src.oLE, bytes));
    this.inst.x.setPosE(src.x.getPosE());
  }

  reset(): void {
    this.inst.clearState();
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.view(), this.scale, out);
  }
}
