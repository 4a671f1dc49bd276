import { existsSync, readFileSync } from 'node:fs';
import { PACKAGE_ROOT } from '../../paths.js';
import { quantize, saturate, scaleRound, type QFormat } from '../fixed.js';
import { fixedConstants, formatOf } from '../fixedKernel.js';
import { float32Constants } from '../float32Kernel.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from '../types.js';

/**
 * The fast kernels: hand-written WebAssembly (src/dsp/wasm/kernels.wat) behind the same
 * interfaces as the reference kernels. float64 uses 128-bit SIMD; float32 f32 in tap order (its
 * clean FIR four samples per SIMD lane); q15 and q31 scalar 64-bit integers. float32, q15 and q31
 * reproduce the reference bit for bit. Samples are copied in and out a chunk at a time; the
 * weights and delay lines live in the module's memory.
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
  setMeanRemoval(every: number): void;
  f64Fir(n: number): void;
  f32Run(n: number, flags: number, mu: number, delta: number, c: number, lim: number): void;
  f32Fir(n: number): void;
  setRing32(): void;
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

/** Whether the fast kernels implement this spec: LMS and NLMS in every arithmetic. */
export function hasFastKernel(spec: AdaptiveSpec): boolean {
  return (spec.algorithm === 'lms' || spec.algorithm === 'nlms') && fastKernelsAvailable();
}

/**
 * One module instance laid out for an L-tap filter: weights, two delay lines, chunk buffers. The
 * memory never grows after construction, so the typed views over it are made once here.
 */
class Instance {
  readonly x: Exports;
  readonly oW = 0;
  readonly oLE: number;
  readonly oLA: number;
  readonly oIO: number;
  /** Chunk buffers: reference, desired, noise in; estimate, error out. */
  readonly inX: Float64Array;
  readonly inD: Float64Array;
  readonly inN: Float64Array;
  readonly outY: Float64Array;
  readonly outE: Float64Array;
  readonly wF64: Float64Array;
  readonly wI32: Int32Array;
  readonly wF32: Float32Array;
  readonly bytes: Uint8Array;

  /** fixed: the Q format, or null for float; single: float32 (4-byte weights and lines). */
  constructor(readonly L: number, fixed: QFormat | null, rounding: string, single = false) {
    const mod = wasmModule();
    if (mod === null) throw new Error(`the fast kernels are not built (${WASM_FILE.pathname}); run npm run build`);
    this.x = new WebAssembly.Instance(mod).exports as unknown as Exports;
    const word = fixed || single ? 4 : 8;
    const wBytes = (word * L + 15) & ~15;
    // Doubled rings of L + 1 samples (float64 and fixed: the fused update reads x(n-1)) or L + 3
    // (float32: the clean FIR filters four samples at once).
    const lineBytes = (word * 2 * (L + (single ? 3 : 1)) + 15) & ~15;
    this.oLE = wBytes;
    this.oLA = this.oLE + lineBytes;
    this.oIO = this.oLA + lineBytes;
    const total = this.oIO + 5 * 8 * CHUNK;
    const pages = Math.ceil(total / 65536) - this.x.memory.buffer.byteLength / 65536;
    if (pages > 0) this.x.memory.grow(pages);
    const io = (k: number) => this.oIO + k * 8 * CHUNK;
    this.x.setLayout(L, this.oW, this.oLE, this.oLA, io(0), io(1), io(2), io(3), io(4));
    if (fixed) this.x.setFormat(fixed.fracBits, rounding === 'nearest' ? 1 : 0);
    if (single) this.x.setRing32();
    const buf = this.x.memory.buffer;
    [this.inX, this.inD, this.inN, this.outY, this.outE] = [0, 1, 2, 3, 4].map((k) => new Float64Array(buf, io(k), CHUNK)) as [Float64Array, Float64Array, Float64Array, Float64Array, Float64Array];
    this.wF64 = new Float64Array(buf, this.oW, L);
    this.wI32 = new Int32Array(buf, this.oW, L);
    this.wF32 = new Float32Array(buf, this.oW, L);
    this.bytes = new Uint8Array(buf);
  }

  /** Copies n samples from `src` at `from` into a chunk buffer (no views made). */
  static load(dst: Float64Array, src: Float64Array, from: number, n: number): void {
    for (let j = 0; j < n; j++) dst[j] = src[from + j]!;
  }

  static store(dst: Float64Array, at: number, src: Float64Array, n: number): void {
    for (let j = 0; j < n; j++) dst[at + j] = src[j]!;
  }

  clearState(): void {
    this.bytes.fill(0, 0, this.oIO);
    this.x.reset();
  }
}

export class WasmAdaptiveKernel implements AdaptiveKernel {
  adapting = true;
  private readonly inst: Instance;
  private readonly fmt: QFormat | null;
  private readonly scale: number;
  private muQ = 0n;
  private deltaQ = 0n;
  private lfQ = 0n;
  private shift = -1;
  private shiftc = 0;
  private extraSat = 0;
  private noiseOn = 0;
  private readonly single: boolean;
  private f32!: ReturnType<typeof float32Constants>;

  constructor(public spec: AdaptiveSpec) {
    this.fmt = formatOf(spec.arithmetic);
    this.single = spec.arithmetic === 'float32';
    this.inst = new Instance(spec.taps, this.fmt, spec.rounding, this.single);
    this.scale = this.fmt ? 2 ** -this.fmt.fracBits : 1;
    this.retune(spec);
  }

  retune(spec: AdaptiveSpec): void {
    this.flush();
    this.spec = spec;
    this.f32 = float32Constants(spec);
    const q = this.fmt ? fixedConstants(spec, this.fmt) : { muQ: 0, deltaQ: 0, lfQ: 0 };
    this.muQ = BigInt(q.muQ);
    this.deltaQ = BigInt(q.deltaQ);
    this.lfQ = BigInt(q.lfQ);
    this.shift = spec.leakShift ?? -1;
    this.shiftc = spec.leakShift === null ? 0 : 2 ** -spec.leakShift;
    this.inst.x.setMeanRemoval(spec.meanRemovalEvery ?? 0);
  }

  get weightSaturations(): number {
    return this.inst.x.getSatW() + this.extraSat;
  }

  get signalSaturations(): number {
    return this.inst.x.getSat();
  }

  run(x: Float64Array, d: Float64Array, noise: Float64Array | null, y: Float64Array, e: Float64Array, start: number, end: number): void {
    const { inst, spec } = this;
    this.noiseOn = noise === null ? 0 : 1;
    const flags = (spec.algorithm === 'nlms' ? 1 : 0) | (noise === null ? 0 : 2) | (this.adapting ? 4 : 0);
    for (let i = start; i < end; i += CHUNK) {
      const n = Math.min(CHUNK, end - i);
      Instance.load(inst.inX, x, i, n);
      Instance.load(inst.inD, d, i, n);
      if (noise !== null) Instance.load(inst.inN, noise, i, n);
      if (this.single) inst.x.f32Run(n, flags, this.f32.mu, this.f32.delta, this.f32.c, this.f32.limit);
      else if (this.fmt === null) inst.x.f64Run(n, flags, spec.step, spec.delta, spec.leak, this.shiftc, spec.weightLimit);
      else inst.x.qRun(n, flags, this.muQ, this.deltaQ, this.lfQ, this.shift);
      Instance.store(y, i, inst.outY, n);
      Instance.store(e, i, inst.outE, n);
    }
  }

  /** Applies the update still pending from the last sample. */
  private flush(): void {
    if (this.single) return;
    if (this.fmt === null) this.inst.x.f64Flush(this.noiseOn, this.spec.weightLimit);
    else this.inst.x.qFlush(this.noiseOn, this.shift);
  }

  private clip(v: number): number {
    const s = saturate(v, this.fmt!);
    if (s !== v) this.extraSat++;
    return s;
  }

  private view(): Float64Array | Int32Array | Float32Array {
    return this.single ? this.inst.wF32 : this.fmt === null ? this.inst.wF64 : this.inst.wI32;
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
    if (this.fmt === null && !this.single) this.inst.x.f64Rebound();
  }

  copyTo(fir: FirKernel): void {
    fir.setWeights(this.getWeights());
  }

  reset(): void {
    this.inst.clearState();
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
  private readonly single: boolean;

  constructor(private readonly spec: AdaptiveSpec) {
    this.fmt = formatOf(spec.arithmetic);
    this.single = spec.arithmetic === 'float32';
    this.inst = new Instance(spec.taps, this.fmt, spec.rounding, this.single);
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
      Instance.load(inst.inX, x, i, n);
      Instance.load(inst.inD, d, i, n);
      if (this.single) inst.x.f32Fir(n);
      else if (this.fmt === null) inst.x.f64Fir(n);
      else inst.x.qFir(n);
      Instance.store(y, i, inst.outY, n);
      Instance.store(e, i, inst.outE, n);
    }
  }

  private view(): Float64Array | Int32Array | Float32Array {
    return this.single ? this.inst.wF32 : this.fmt === null ? this.inst.wF64 : this.inst.wI32;
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
    this.inst.bytes.set(src.bytes.subarray(src.oLE, src.oLA), this.inst.oLE);
    this.inst.x.setPosE(src.x.getPosE());
  }

  reset(): void {
    this.inst.clearState();
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.view(), this.scale, out);
  }
}
