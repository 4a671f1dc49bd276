import { Counter, Gauge, Histogram, Registry, collectDefaultMetrics } from 'prom-client';
import type { DriftForecast } from '../analysis/forecast.js';
import type { WindowReport } from '../engine/dualPath.js';
import { CRITERIA } from '../engine/supervisor.js';

const PATHS = ['adaptive', 'clean'] as const;

/**
 * The service's metrics, in one dedicated registry under the `tapwarden_` prefix, named after
 * Prometheus practice: base units (seconds, dB as a unit suffix for levels), `_total` on
 * counters. The process and Node.js runtime metrics keep the client library's standard names
 * (`process_*`, `nodejs_*`) so that stock dashboards find them.
 */
export class ServiceMetrics {
  readonly registry = new Registry();
  private readonly startedAt = Date.now();
  private lastHandoffAt: number | null = null;

  readonly samples = new Counter({ name: 'tapwarden_samples_processed_total', help: 'Samples (frames) processed by the engine.', registers: [this.registry] });
  readonly blocks = new Counter({ name: 'tapwarden_blocks_processed_total', help: 'Blocks processed by the engine.', registers: [this.registry] });
  readonly blockSeconds = new Histogram({
    name: 'tapwarden_block_processing_seconds',
    help: 'Time the engine took per block, in seconds.',
    buckets: [1e-5, 2e-5, 5e-5, 1e-4, 2e-4, 5e-4, 1e-3, 2e-3, 5e-3, 1e-2, 2e-2, 5e-2, 0.1],
    registers: [this.registry],
  });
  readonly accepted = new Counter({ name: 'tapwarden_handoffs_accepted_total', help: 'Weight handoffs to the clean path (supervisor and forced).', labelNames: ['reason'], registers: [this.registry] });
  readonly rejected = new Counter({
    name: 'tapwarden_handoffs_rejected_total',
    help: 'Windows in which the supervisor refused a handoff, by failed criterion (a window can fail several).',
    labelNames: ['criterion'],
    registers: [this.registry],
  });
  readonly decisions = new Counter({ name: 'tapwarden_supervisor_decisions_total', help: 'Supervisor decisions by outcome.', labelNames: ['outcome'], registers: [this.registry] });
  readonly rollbacks = new Counter({ name: 'tapwarden_rollbacks_total', help: 'Restarts of the adaptive path from the clean weights.', labelNames: ['reason'], registers: [this.registry] });
  readonly errorPower = new Gauge({ name: 'tapwarden_error_power_db', help: 'Error power over the last window, dB re full scale.', labelNames: ['path'], registers: [this.registry] });
  readonly cancellation = new Gauge({ name: 'tapwarden_cancellation_db', help: 'Cancellation 10 log10(Pd/Pe) over the last window, dB.', labelNames: ['path'], registers: [this.registry] });
  readonly desiredPower = new Gauge({ name: 'tapwarden_desired_power_db', help: 'Desired-signal power over the last window, dB re full scale.', registers: [this.registry] });
  readonly referencePower = new Gauge({ name: 'tapwarden_reference_power_db', help: 'Reference power over the last window, dB re full scale.', registers: [this.registry] });
  readonly weightMean = new Gauge({ name: 'tapwarden_weight_mean', help: 'Mean of the weights (full scale = 1).', labelNames: ['path'], registers: [this.registry] });
  readonly weightNorm = new Gauge({ name: 'tapwarden_weight_norm', help: 'Euclidean norm of the weights.', labelNames: ['path'], registers: [this.registry] });
  readonly weightMax = new Gauge({ name: 'tapwarden_weight_max_abs', help: 'Largest weight magnitude.', labelNames: ['path'], registers: [this.registry] });
  readonly saturations = new Counter({ name: 'tapwarden_saturations_total', help: 'Stores that clipped (weights, outputs, inputs).', labelNames: ['path'], registers: [this.registry] });
  readonly nonFinite = new Counter({ name: 'tapwarden_nonfinite_input_samples_total', help: 'NaN or infinite input samples replaced by zero.', registers: [this.registry] });
  readonly overruns = new Counter({ name: 'tapwarden_queue_overruns_total', help: 'Input blocks dropped because the engine queue was full.', registers: [this.registry] });
  readonly underruns = new Counter({ name: 'tapwarden_queue_underruns_total', help: 'Times playback drained before the next output block arrived.', registers: [this.registry] });
  readonly queueDepth = new Gauge({ name: 'tapwarden_queue_depth_blocks', help: 'Blocks waiting for the engine.', registers: [this.registry] });
  readonly streamUp = new Gauge({ name: 'tapwarden_stream_up', help: '1 while the input stream delivers data, else 0.', registers: [this.registry] });
  readonly adapting = new Gauge({ name: 'tapwarden_adaptation_enabled', help: '1 while the adaptive path adapts, 0 while frozen.', registers: [this.registry] });
  readonly handoffsEnabled = new Gauge({ name: 'tapwarden_handoffs_enabled', help: '1 while handoffs may happen, 0 while frozen.', registers: [this.registry] });
  readonly cleanVersion = new Gauge({ name: 'tapwarden_clean_weights_version', help: 'Handoffs the clean path has taken since start.', registers: [this.registry] });
  readonly feedClients = new Gauge({ name: 'tapwarden_feed_clients', help: 'Connected WebSocket feed clients.', registers: [this.registry] });
  readonly feedDropped = new Counter({ name: 'tapwarden_feed_dropped_messages_total', help: 'Feed messages not sent to a client that had fallen behind.', registers: [this.registry] });
  readonly weightMeanLimit = new Gauge({ name: 'tapwarden_weight_mean_limit', help: 'The supervisor bound on |weight mean| (supervisor.maxWeightMean).', registers: [this.registry] });
  readonly weightLimit = new Gauge({ name: 'tapwarden_weight_limit', help: 'The largest |w| the arithmetic stores (1 in fixed point, filter.weightLimit in float).', registers: [this.registry] });
  readonly limitEta = new Gauge({
    name: 'tapwarden_weight_limit_eta_seconds',
    help: 'Forecast seconds until an adaptive tap reaches the weight limit at the current weight-mean drift (+Inf when not drifting toward it).',
    registers: [this.registry],
  });
  readonly meanBoundEta = new Gauge({
    name: 'tapwarden_weight_mean_bound_eta_seconds',
    help: 'Forecast seconds until |adaptive weight mean| reaches supervisor.maxWeightMean (+Inf when not rising).',
    registers: [this.registry],
  });
  readonly snapshots = new Counter({ name: 'tapwarden_snapshot_writes_total', help: 'Weight snapshot writes by result.', labelNames: ['result'], registers: [this.registry] });

  constructor() {
    collectDefaultMetrics({ register: this.registry });
    // prom-client exports these gauges with a `_total` suffix, which Prometheus reserves for
    // counters (promtool check metrics flags them); their *_total-free siblings stay.
    for (const name of ['nodejs_active_handles_total', 'nodejs_active_requests_total', 'nodejs_active_resources_total']) {
      this.registry.removeSingleMetric(name);
    }
    const self = this;
    new Gauge({
      name: 'tapwarden_last_handoff_age_seconds',
      help: 'Seconds since the clean path last took weights (since start if never).',
      registers: [this.registry],
      collect() {
        this.set((Date.now() - (self.lastHandoffAt ?? self.startedAt)) / 1000);
      },
    });
    for (const p of PATHS) this.saturations.labels(p).inc(0);
    for (const c of CRITERIA) this.rejected.labels(c).inc(0);
    for (const o of ['accepted', 'pending', 'idle', 'rejected']) this.decisions.labels(o).inc(0);
    this.accepted.labels('supervisor').inc(0);
    this.adapting.set(1);
    this.handoffsEnabled.set(1);
  }

  onForecast(f: DriftForecast): void {
    this.limitEta.set(f.limitEtaSeconds ?? Infinity);
    this.meanBoundEta.set(f.meanBoundEtaSeconds ?? Infinity);
  }

  onWindow(r: WindowReport): void {
    for (const p of PATHS) {
      const f = r[p];
      this.errorPower.labels(p).set(f.errorPowerDb);
      this.cancellation.labels(p).set(f.cancellationDb);
      this.weightMean.labels(p).set(f.weightMean);
      this.weightNorm.labels(p).set(f.weightNorm);
      this.weightMax.labels(p).set(f.maxAbsWeight);
    }
    this.desiredPower.set(r.desiredPowerDb);
    this.referencePower.set(r.referencePowerDb);
    this.decisions.labels(r.decision.outcome).inc();
    if (r.decision.outcome === 'rejected') for (const c of r.decision.failed) this.rejected.labels(c).inc();
  }

  onHandoff(reason: string, version: number): void {
    if (reason !== 'restored') this.accepted.labels(reason).inc();
    this.lastHandoffAt = Date.now();
    this.cleanVersion.set(version);
  }

  private readonly seen = { adaptive: 0, clean: 0, nonFinite: 0, overruns: 0 };

  /** Counters the engine reports as running totals: adds what is new since the last call. */
  setTotals(t: { adaptive: number; clean: number; nonFinite: number; overruns: number }): void {
    const add = (key: keyof ServiceMetrics['seen'], counter: Counter, labels: Record<string, string>) => {
      const d = t[key] - this.seen[key];
      if (d > 0) counter.inc(labels, d);
      this.seen[key] = t[key];
    };
    add('adaptive', this.saturations, { path: 'adaptive' });
    add('clean', this.saturations, { path: 'clean' });
    add('nonFinite', this.nonFinite, {});
    add('overruns', this.overruns, {});
  }
}
