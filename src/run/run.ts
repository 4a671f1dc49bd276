import { DriftForecaster } from '../analysis/forecast.js';
import { weightLimitOf } from '../dsp/kernels.js';
import { DualPathEngine, type EngineSettings, type WeightSnapshot, type WindowReport } from '../engine/dualPath.js';
import type { DecisionRecord, RunEvent } from './record.js';
import { captureState, restoreState, type RunState } from './state.js';

/**
 * Where a run's results go. Every sink gets the same objects; a sink that keeps history keeps
 * it bounded (a fixed histogram, a decimated series, a file written as it goes).
 */
export interface RunSink {
  /** One per window. */
  onRecord?(record: DecisionRecord): void;
  /** A handoff (with the weights the clean path now holds, tap 0 first) or a rollback (null). */
  onEvent?(event: RunEvent, cleanWeights: Float64Array | null): void;
  /** Each processed block's output streams and the desired input they came from (arrays reused after the call). */
  onBlock?(clean: Float64Array, adaptive: Float64Array, n: number, desired: Float64Array): void;
}

/** Fans one stream of results out to several sinks, in order (indexed loops: no iterator per call). */
export function fanOut(sinks: readonly RunSink[]): Required<RunSink> {
  const records = sinks.filter((s) => s.onRecord);
  const events = sinks.filter((s) => s.onEvent);
  const blocks = sinks.filter((s) => s.onBlock);
  return {
    onRecord: (r) => {
      for (let i = 0; i < records.length; i++) records[i]!.onRecord!(r);
    },
    onEvent: (e, w) => {
      for (let i = 0; i < events.length; i++) events[i]!.onEvent!(e, w);
    },
    onBlock: (c, a, n, d) => {
      for (let i = 0; i < blocks.length; i++) blocks[i]!.onBlock!(c, a, n, d);
    },
  };
}

/**
 * A run: blocks from a source go through one dual-path engine; each window becomes one decision
 * record (the engine's figures and decision, and the drift forecast, which the run owns), and
 * records, events and output blocks go to the sinks. Replay and serve differ only in their
 * source and their sinks. `process` allocates nothing per block.
 */
export class Run {
  readonly engine: DualPathEngine;
  private readonly sink: Required<RunSink>;
  private readonly forecaster: DriftForecaster;
  private readonly weights: Float64Array;
  private readonly weightLimit: number;
  private cleanOut: Float64Array;
  private adaptiveOut: Float64Array;

  constructor(
    settings: EngineSettings,
    /** The measurement channel the records are tagged with. */
    readonly channel: number,
    sinks: readonly RunSink[],
    maxBlockFrames = 4096,
  ) {
    this.sink = fanOut(sinks);
    const taps = settings.filter.taps * (settings.filter.references ?? 1);
    this.weights = new Float64Array(taps);
    this.weightLimit = weightLimitOf(settings.filter);
    this.forecaster = new DriftForecaster(taps, settings.supervisor.windowSeconds);
    this.cleanOut = new Float64Array(maxBlockFrames);
    this.adaptiveOut = new Float64Array(maxBlockFrames);
    this.engine = new DualPathEngine(settings, {
      onWindow: (r) => this.window(r),
      onHandoff: (s) => this.handoff(s),
      onRollback: (sample, reason) => this.rolledBack(sample, reason),
      onSettings: (sample, old, next) => this.settingsChanged(sample, old, next),
    });
  }

  get settings(): EngineSettings {
    return this.engine.settings;
  }

  /** The whole state between two blocks: engine, kernels, supervisor, forecaster (src/run/state.ts). */
  exportState(): RunState {
    return captureState({ engine: this.engine, forecaster: this.forecaster });
  }

  /** Continues from an exported state; this run must have been built from the same settings. */
  importState(state: RunState): void {
    restoreState({ engine: this.engine, forecaster: this.forecaster }, state);
  }

  private settingsChanged(sample: number, old: EngineSettings, next: EngineSettings): void {
    const changes: Record<string, { from: unknown; to: unknown }> = {};
    for (const section of ['filter', 'supervisor'] as const) {
      const a = old[section] as unknown as Record<string, unknown>;
      const b = next[section] as unknown as Record<string, unknown>;
      for (const k of Object.keys(b)) if (a[k] !== b[k]) changes[`${section}.${k}`] = { from: a[k], to: b[k] };
    }
    this.sink.onEvent({ type: 'settings', channel: this.channel, sample, timeSeconds: this.seconds(sample), changes }, null);
  }

  /** Processes n frames of reference(s) and desired (n may exceed the block size given at construction). */
  process(ref: Float64Array | readonly Float64Array[], des: Float64Array, n: number): void {
    if (n > this.cleanOut.length) {
      this.cleanOut = new Float64Array(n);
      this.adaptiveOut = new Float64Array(n);
    }
    this.engine.process(ref, des, this.cleanOut, this.adaptiveOut, n);
    this.sink.onBlock(this.cleanOut, this.adaptiveOut, n, des);
  }

  private seconds(sample: number): number {
    return sample / this.settings.sampleRate;
  }

  private window(r: WindowReport): void {
    this.engine.readAdaptiveWeights(this.weights);
    this.forecaster.push(r.timeSeconds, this.weights);
    const d = r.decision;
    this.sink.onRecord({
      type: 'decision',
      channel: this.channel,
      window: r.index,
      sample: r.endSample,
      timeSeconds: r.timeSeconds,
      outcome: d.outcome,
      failed: d.failed,
      rollback: d.rollback,
      passes: d.passes,
      failures: d.failures,
      cleanVersion: r.cleanVersion,
      referencePowerDb: r.referencePowerDb,
      desiredPowerDb: r.desiredPowerDb,
      nonFiniteSamples: r.nonFiniteSamples,
      outOfRangeSamples: r.outOfRangeSamples,
      adaptive: r.adaptive,
      clean: r.clean,
      forecast: this.forecaster.forecast(this.weightLimit, this.settings.supervisor.maxWeightMean),
    });
  }

  private handoff(s: WeightSnapshot): void {
    // Restore and reset move the adaptive weights too: the trend starts again.
    if (s.reason === 'restored' || s.reason === 'reset') this.forecaster.restart();
    this.sink.onEvent({ type: 'handoff', channel: this.channel, sample: s.sample, timeSeconds: this.seconds(s.sample), version: s.version, reason: s.reason }, s.weights);
  }

  private rolledBack(sample: number, reason: 'supervisor' | 'forced'): void {
    this.forecaster.restart();
    this.sink.onEvent({ type: 'rollback', channel: this.channel, sample, timeSeconds: this.seconds(sample), reason }, null);
  }
}
