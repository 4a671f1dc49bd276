import { createAdaptiveKernel, createFirKernel } from '../dsp/kernels.js';
import { GaussianNoise } from '../dsp/noise.js';
import { INPUT_LIMIT, cancellationDb, powerDb, sigmaOfDb } from '../dsp/level.js';
import type { AdaptiveKernel, AdaptiveSpec, FirKernel, WeightStats } from '../dsp/types.js';
import { INITIAL_STATE, decide, type Decision, type Policy, type SupervisorState } from './supervisor.js';

export interface EngineSettings {
  readonly sampleRate: number;
  readonly filter: AdaptiveSpec & { readonly noiseInjectionDb: number | null; readonly noiseSeed: number };
  readonly supervisor: Policy & { readonly windowSeconds: number; readonly crossfadeSeconds: number };
  /** What the output streams carry: d - y, or y. */
  readonly outputSignal: 'error' | 'estimate';
}

export interface PathFigures {
  errorPowerDb: number;
  cancellationDb: number;
  weightMean: number;
  weightNorm: number;
  maxAbsWeight: number;
  /** Smallest and largest weight (signed). */
  minWeight: number;
  maxWeight: number;
  /** Weight stores that clipped during the window (the drift symptom). */
  weightSaturations: number;
  /** Signal stores that clipped during the window (input, output, error: a level problem). */
  signalSaturations: number;
}

export interface WindowReport {
  index: number;
  /** First sample after the window (the window is [endSample - length, endSample)). */
  endSample: number;
  timeSeconds: number;
  referencePowerDb: number;
  desiredPowerDb: number;
  /** Non-finite input samples in the window (replaced by 0). */
  nonFiniteSamples: number;
  /** Finite input samples beyond +-INPUT_LIMIT in the window (clamped). */
  outOfRangeSamples: number;
  adaptive: PathFigures;
  clean: PathFigures;
  decision: Decision;
  /** Version of the clean path's weights after this window's decision. */
  cleanVersion: number;
}

/** An immutable copy of weights handed to the clean path. */
export interface WeightSnapshot {
  readonly version: number;
  readonly weights: Float64Array;
  /** Sample index at which the clean path took them. */
  readonly sample: number;
  readonly reason: HandoffReason;
}

/** Why the clean path took new weights: a passing window, an operator, a snapshot, an operator reset. */
/** Clipped stores since the start, by path and by what clipped (the clean path's weights never adapt). */
export interface EngineSaturations {
  readonly adaptiveWeights: number;
  readonly adaptiveSignal: number;
  readonly cleanSignal: number;
}

export type HandoffReason = 'supervisor' | 'forced' | 'restored' | 'reset';

export interface EngineListener {
  onWindow?(report: WindowReport): void;
  onHandoff?(snapshot: WeightSnapshot): void;
  onRollback?(sample: number, reason: 'supervisor' | 'forced'): void;
  /** New settings took effect at a window boundary (serve's live settings). */
  onSettings?(sample: number, old: EngineSettings, next: EngineSettings): void;
}

const CHUNK = 1024;

/**
 * The dual-path engine: an adaptive path that learns on the (optionally noise-injected)
 * reference, and a clean path that filters the un-noised reference with weights it receives
 * only by handoff. Input is consumed in chunks cut at window boundaries, so decisions and
 * outputs do not depend on how callers block the stream.
 */
export class DualPathEngine {
  private windowLength: number;
  private crossfadeLength: number;
  private readonly adaptive: AdaptiveKernel;
  private readonly clean: FirKernel;
  private readonly fading: FirKernel;
  private readonly noiseGen: GaussianNoise | null;
  private readonly noiseSigma: number;
  /** References (K per sample, interleaved), desired, injected noise (K per sample). */
  private readonly K: number;
  private readonly x: Float64Array;
  private readonly d = new Float64Array(CHUNK);
  private readonly noise: Float64Array;
  /** A lone reference array as the list the chunk loop reads (no array per call). */
  private readonly lone: Float64Array[] = [new Float64Array(0)];
  private readonly yA = new Float64Array(CHUNK);
  private readonly eA = new Float64Array(CHUNK);
  private readonly yC = new Float64Array(CHUNK);
  private readonly eC = new Float64Array(CHUNK);
  private readonly yOld = new Float64Array(CHUNK);
  private readonly eOld = new Float64Array(CHUNK);
  private readonly wsA: WeightStats = { mean: 0, norm: 0, maxAbs: 0, min: 0, max: 0 };
  private readonly wsC: WeightStats = { mean: 0, norm: 0, maxAbs: 0, min: 0, max: 0 };

  private supervisorState: SupervisorState = INITIAL_STATE;
  private sample = 0;
  private windowIndex = 0;
  private inWindow = 0;
  private sumX = 0;
  private sumD = 0;
  private sumEA = 0;
  private sumEC = 0;
  private nonFiniteWindow = 0;
  private outOfRangeWindow = 0;
  private satAW0 = 0;
  private satAS0 = 0;
  private satCS0 = 0;
  private fadePos = 0;
  private fadeActive = false;
  private cleanSnapshot: WeightSnapshot;
  private current: EngineSettings;
  private pendingSettings: EngineSettings | null = null;
  /** Non-finite input samples replaced by zero, since the start. */
  nonFiniteSamples = 0;
  /** Finite input samples beyond +-INPUT_LIMIT clamped to it, since the start. */
  outOfRangeSamples = 0;

  constructor(
    settings: EngineSettings,
    private readonly listener: EngineListener = {},
  ) {
    this.current = settings;
    const { sampleRate, filter, supervisor } = settings;
    this.K = filter.references ?? 1;
    this.x = new Float64Array(CHUNK * this.K);
    this.noise = new Float64Array(CHUNK * this.K);
    this.windowLength = Math.max(1, Math.round(supervisor.windowSeconds * sampleRate));
    this.crossfadeLength = Math.max(0, Math.round(supervisor.crossfadeSeconds * sampleRate));
    this.adaptive = createAdaptiveKernel(filter);
    this.clean = createFirKernel(filter, undefined, this.adaptive);
    this.fading = createFirKernel(filter, undefined, this.adaptive);
    this.noiseGen = filter.noiseInjectionDb === null ? null : new GaussianNoise(filter.noiseSeed);
    this.noiseSigma = filter.noiseInjectionDb === null ? 0 : sigmaOfDb(filter.noiseInjectionDb);
    this.cleanSnapshot = { version: 0, weights: new Float64Array(filter.taps * this.K), sample: 0, reason: 'restored' };
  }

  /** Samples per supervisor window, and per crossfade, under the settings in effect. */
  get windowSamples(): number {
    return this.windowLength;
  }

  get crossfadeSamples(): number {
    return this.crossfadeLength;
  }

  /** The settings in effect (they change only at a window boundary, by changeSettings). */
  get settings(): EngineSettings {
    return this.current;
  }

  /**
   * New settings from the next window boundary on: the same algorithm, taps, arithmetic, noise
   * and output (the caller checks that); the filter's step, delta, leak, leakShift and mean
   * removal, and any supervisor setting, may change. A second call before the boundary replaces
   * the first.
   */
  changeSettings(next: EngineSettings): void {
    this.pendingSettings = next;
  }

  /** Settings accepted by changeSettings and not yet in effect, or null. */
  get queuedSettings(): EngineSettings | null {
    return this.pendingSettings;
  }

  /** Samples consumed since the start. */
  get samples(): number {
    return this.sample;
  }

  /** Clipped stores since the start: adaptive weights, adaptive signals, clean-path signals. */
  get saturations(): EngineSaturations {
    return {
      adaptiveWeights: this.adaptiveWeightSaturations,
      adaptiveSignal: this.adaptiveSignalSaturations,
      cleanSignal: this.cleanSignalSaturations,
    };
  }

  get adaptiveWeightSaturations(): number {
    return this.adaptive.weightSaturations;
  }

  get adaptiveSignalSaturations(): number {
    return this.adaptive.signalSaturations;
  }

  get cleanSignalSaturations(): number {
    return this.clean.signalSaturations + this.fading.signalSaturations;
  }

  get cleanWeights(): WeightSnapshot {
    return this.cleanSnapshot;
  }

  adaptiveWeights(): Float64Array {
    return this.adaptive.getWeights();
  }

  /** The adaptive weights into `out` (length taps), allocating nothing. */
  readAdaptiveWeights(out: Float64Array): void {
    this.adaptive.readWeights(out);
  }

  get adapting(): boolean {
    return this.adaptive.adapting;
  }

  set adapting(on: boolean) {
    this.adaptive.adapting = on;
  }

  /** While set, a window that passes every check stays pending instead of handing over. */
  handoffsHeld = false;

  /**
   * Processes n samples of reference and desired; writes the clean path's and the adaptive
   * path's output streams. With several references (filter.references), `ref` is one array per
   * reference, in order. Non-finite inputs are counted and replaced by zero; finite inputs
   * beyond +-INPUT_LIMIT are counted and clamped to it.
   */
  process(ref: Float64Array | readonly Float64Array[], des: Float64Array, cleanOut: Float64Array, adaptiveOut: Float64Array, n: number): void {
    let refs: readonly Float64Array[];
    if (ref instanceof Float64Array) {
      this.lone[0] = ref;
      refs = this.lone;
    } else refs = ref;
    if (refs.length !== this.K) throw new Error(`the engine takes ${this.K} reference(s), got ${refs.length}`);
    let i = 0;
    while (i < n) {
      const m = Math.min(n - i, CHUNK, this.windowSamples - this.inWindow);
      this.processChunk(refs, des, cleanOut, adaptiveOut, i, m);
      i += m;
      this.inWindow += m;
      this.sample += m;
      if (this.inWindow === this.windowSamples) this.closeWindow();
    }
  }

  private processChunk(
    refs: readonly Float64Array[],
    des: Float64Array,
    cleanOut: Float64Array,
    adaptiveOut: Float64Array,
    offset: number,
    m: number,
  ): void {
    const { x, d, noise, yA, eA, yC, eC, K } = this;
    for (let k = 0; k < K; k++) this.scrub(refs[k]!, offset, m, x, k, K);
    this.scrub(des, offset, m, d, 0, 1);
    if (this.noiseGen !== null) this.noiseGen.fill(noise, this.noiseSigma, 0, m * K);

    this.adaptive.run(x, d, this.noiseGen === null ? null : noise, yA, eA, 0, m);
    this.clean.run(x, d, yC, eC, 0, m);
    if (this.fadeActive) this.crossfade(m);

    const estimate = this.settings.outputSignal === 'estimate';
    // Summed in sample order from the window's start, whatever the blocks: the window's figures
    // are the same to the last bit however a caller blocks the stream (a resumed run relies on it).
    let sx = this.sumX;
    let sd = this.sumD;
    let sa = this.sumEA;
    let sc = this.sumEC;
    // The references' power together (sample by sample, reference by reference).
    for (let i = 0; i < m * K; i++) sx += x[i]! * x[i]!;
    for (let j = 0; j < m; j++) {
      sd += d[j]! * d[j]!;
      sa += eA[j]! * eA[j]!;
      sc += eC[j]! * eC[j]!;
      cleanOut[offset + j] = estimate ? yC[j]! : eC[j]!;
      adaptiveOut[offset + j] = estimate ? yA[j]! : eA[j]!;
    }
    this.sumX = sx;
    this.sumD = sd;
    this.sumEA = sa;
    this.sumEC = sc;
  }

  /**
   * Copies m input samples from src[offset ..] to dst[at + j stride]: non-finite ones counted and
   * replaced by zero, finite ones beyond +-INPUT_LIMIT counted and clamped to it.
   */
  private scrub(src: Float64Array, offset: number, m: number, dst: Float64Array, at: number, stride: number): void {
    let bad = 0;
    let over = 0;
    for (let j = 0; j < m; j++) {
      let v = src[offset + j]!;
      // Compare, do not call: NaN fails both tests and +-Infinity passes the second.
      if (!(v <= INPUT_LIMIT && v >= -INPUT_LIMIT)) {
        if (v !== v || v === Infinity || v === -Infinity) {
          v = 0;
          bad++;
        } else {
          v = v > 0 ? INPUT_LIMIT : -INPUT_LIMIT;
          over++;
        }
      }
      dst[at + j * stride] = v;
    }
    this.nonFiniteWindow += bad;
    this.nonFiniteSamples += bad;
    this.outOfRangeWindow += over;
    this.outOfRangeSamples += over;
  }

  /** Blends the previous weights' output into the new one's with a raised-cosine ramp. */
  private crossfade(m: number): void {
    const { d, yC, eC, yOld, eOld } = this;
    const len = this.crossfadeSamples;
    // Only the samples the ramp uses: the old filter's clipped stores are counted for those alone
    // (however the stream is blocked), and it is reloaded before the next fade.
    const k = Math.min(m, len - this.fadePos);
    this.fading.run(this.x, d, yOld, eOld, 0, k);
    for (let j = 0; j < k; j++, this.fadePos++) {
      const a = 0.5 - 0.5 * Math.cos((Math.PI * (this.fadePos + 1)) / (len + 1));
      const y = yOld[j]! + a * (yC[j]! - yOld[j]!);
      yC[j] = y;
      eC[j] = d[j]! - y;
    }
    if (this.fadePos >= len) this.fadeActive = false;
  }

  private closeWindow(): void {
    const n = this.windowSamples;
    const pd = this.sumD / n;
    const adaptiveWeights = this.adaptive.weightSaturations;
    const adaptiveSignal = this.adaptive.signalSaturations;
    const cleanSignal = this.cleanSignalSaturations;
    const adaptive = this.figures(this.adaptive.weightStats(this.wsA), this.sumEA / n, pd, adaptiveWeights - this.satAW0, adaptiveSignal - this.satAS0);
    const clean = this.figures(this.clean.weightStats(this.wsC), this.sumEC / n, pd, 0, cleanSignal - this.satCS0);
    const nonFinite = this.nonFiniteWindow;
    const outOfRange = this.outOfRangeWindow;
    const referencePowerDb = powerDb(this.sumX / n);
    const { decision, state } = decide(
      this.supervisorState,
      {
        referencePowerDb,
        adaptiveErrorPowerDb: adaptive.errorPowerDb,
        adaptiveCancellationDb: adaptive.cancellationDb,
        cleanErrorPowerDb: clean.errorPowerDb,
        adaptiveWeightMean: adaptive.weightMean,
        adaptiveWeightSaturations: adaptive.weightSaturations,
        nonFiniteSamples: nonFinite,
        outOfRangeSamples: outOfRange,
      },
      this.settings.supervisor,
      this.handoffsHeld,
    );
    this.supervisorState = state;
    if (decision.outcome === 'accepted') this.handoff('supervisor');
    if (decision.rollback) this.rollback('supervisor');
    const report: WindowReport = {
      index: this.windowIndex,
      endSample: this.sample,
      timeSeconds: this.sample / this.settings.sampleRate,
      referencePowerDb,
      desiredPowerDb: powerDb(pd),
      nonFiniteSamples: nonFinite,
      outOfRangeSamples: outOfRange,
      adaptive,
      clean,
      decision,
      cleanVersion: this.cleanSnapshot.version,
    };
    this.windowIndex++;
    this.inWindow = 0;
    this.sumX = this.sumD = this.sumEA = this.sumEC = 0;
    this.nonFiniteWindow = 0;
    this.outOfRangeWindow = 0;
    // After a rollback the adaptive weights changed again; the next window counts from here.
    this.satAW0 = this.adaptive.weightSaturations;
    this.satAS0 = this.adaptive.signalSaturations;
    this.satCS0 = this.cleanSignalSaturations;
    this.listener.onWindow?.(report);
    const next = this.pendingSettings;
    if (next !== null) {
      this.pendingSettings = null;
      const old = this.current;
      this.current = next;
      this.windowLength = Math.max(1, Math.round(next.supervisor.windowSeconds * next.sampleRate));
      this.crossfadeLength = Math.max(0, Math.round(next.supervisor.crossfadeSeconds * next.sampleRate));
      this.adaptive.retune(next.filter);
      this.listener.onSettings?.(this.sample, old, next);
    }
  }

  private figures(ws: WeightStats, pe: number, pd: number, weightSaturations: number, signalSaturations: number): PathFigures {
    return {
      errorPowerDb: powerDb(pe),
      cancellationDb: cancellationDb(pd, pe),
      weightMean: ws.mean,
      weightNorm: ws.norm,
      maxAbsWeight: ws.maxAbs,
      minWeight: ws.min,
      maxWeight: ws.max,
      weightSaturations,
      signalSaturations,
    };
  }

  /** Gives the clean path the filter the adaptive path runs, crossfading its output. */
  handoff(reason: 'supervisor' | 'forced'): WeightSnapshot {
    return this.installClean((clean) => this.adaptive.copyTo(clean), reason);
  }

  /** Gives both paths the given weights (e.g. restored from a snapshot). */
  restore(weights: ArrayLike<number>): WeightSnapshot {
    this.adaptive.setWeights(weights);
    return this.installClean((clean) => clean.setWeights(weights), 'restored');
  }

  /** Restarts the adaptive path from the clean path's weights. */
  rollback(reason: 'supervisor' | 'forced'): void {
    this.adaptive.setWeights(this.cleanSnapshot.weights);
    this.supervisorState = INITIAL_STATE;
    this.listener.onRollback?.(this.sample, reason);
  }

  /**
   * Clears both paths' weights and histories and the supervisor's counts. The cleared clean
   * weights are a new version, announced like any handoff (reason 'reset').
   */
  reset(): WeightSnapshot {
    this.adaptive.reset();
    this.clean.reset();
    this.fading.reset();
    this.fadeActive = false;
    this.supervisorState = INITIAL_STATE;
    return this.announce('reset');
  }

  private installClean(load: (clean: FirKernel) => void, reason: HandoffReason): WeightSnapshot {
    if (this.crossfadeSamples > 0 && this.sample > 0) {
      this.fading.copyWeightsFrom(this.clean);
      this.fading.copyHistoryFrom(this.clean);
      this.fadePos = 0;
      this.fadeActive = true;
    }
    load(this.clean);
    return this.announce(reason);
  }

  /** A new clean-path version: the snapshot holds what the clean filter really stores. */
  private announce(reason: HandoffReason): WeightSnapshot {
    this.cleanSnapshot = { version: this.cleanSnapshot.version + 1, weights: this.clean.getWeights(), sample: this.sample, reason };
    this.listener.onHandoff?.(this.cleanSnapshot);
    return this.cleanSnapshot;
  }
}
