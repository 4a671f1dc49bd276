import { Counter, Gauge, Registry, collectDefaultMetrics } from 'prom-client';
import { CAPTURE_CAUSES } from '../config/schema.js';
import { CRITERIA } from '../engine/supervisor.js';
import type { DecisionRecord, RunEvent } from '../run/record.js';
import type { RunSink } from '../run/run.js';
import type { WeightsReply } from './protocol.js';
import { BLOCK_SECONDS_BUCKETS, type ChannelSlot, type Slot, type Telemetry } from './telemetry.js';

const PATHS = ['adaptive', 'clean'] as const;

interface Sample {
  metricName?: string;
  labels: Record<string, string | number>;
  value: number;
}

/**
 * A metric whose values are read from elsewhere at scrape time (the engine worker's shared
 * telemetry): prom-client asks it for its samples and formats them like its own.
 */
function external(registry: Registry, name: string, help: string, type: 'counter' | 'gauge' | 'histogram', values: () => Sample[]): void {
  const metric = { name, help, type, aggregator: 'sum', get: async () => ({ name, help, type, aggregator: 'sum', values: values() }) };
  registry.registerMetric(metric as unknown as Gauge);
}

/**
 * The service's metrics, in one dedicated registry under the `tapwarden_` prefix, named after
 * Prometheus practice: base units (seconds, dB as a unit suffix for levels), `_total` on
 * counters. Per-window figures come from the decision records (this is one of their sinks);
 * running totals come from the worker's telemetry when scraped. The process and Node.js runtime
 * metrics keep the client library's standard names (`process_*`, `nodejs_*`).
 */
export class ServiceMetrics implements RunSink {
  readonly registry = new Registry();
  private readonly startedAt = Date.now();
  /** Per measurement channel (as a label value), when its clean path last took weights. */
  private readonly lastHandoffAt = new Map<string, number>();
  private readonly channels: string[];

  readonly accepted = new Counter({ name: 'tapwarden_handoffs_accepted_total', help: 'Weight handoffs to the clean path (supervisor and forced).', labelNames: ['channel', 'reason'], registers: [this.registry] });
  readonly rejected = new Counter({
    name: 'tapwarden_handoffs_rejected_total',
    help: 'Windows in which the supervisor refused a handoff, by failed criterion (a window can fail several).',
    labelNames: ['channel', 'criterion'],
    registers: [this.registry],
  });
  readonly decisions = new Counter({ name: 'tapwarden_supervisor_decisions_total', help: 'Supervisor decisions by outcome.', labelNames: ['channel', 'outcome'], registers: [this.registry] });
  readonly rollbacks = new Counter({ name: 'tapwarden_rollbacks_total', help: 'Restarts of the adaptive path from the clean weights.', labelNames: ['channel', 'reason'], registers: [this.registry] });
  readonly settingsChanges = new Counter({ name: 'tapwarden_settings_changes_total', help: 'Live settings changes that took effect (POST /api/control/settings).', labelNames: ['channel'], registers: [this.registry] });
  readonly resets = new Counter({ name: 'tapwarden_resets_total', help: 'Operator resets of both paths.', labelNames: ['channel'], registers: [this.registry] });
  readonly errorPower = new Gauge({ name: 'tapwarden_error_power_db', help: 'Error power over the last window, dB re full scale.', labelNames: ['channel', 'path'], registers: [this.registry] });
  readonly cancellation = new Gauge({ name: 'tapwarden_cancellation_db', help: 'Cancellation 10 log10(Pd/Pe) over the last window, dB.', labelNames: ['channel', 'path'], registers: [this.registry] });
  readonly desiredPower = new Gauge({ name: 'tapwarden_desired_power_db', help: 'Desired-signal power over the last window, dB re full scale.', labelNames: ['channel'], registers: [this.registry] });
  readonly referencePower = new Gauge({ name: 'tapwarden_reference_power_db', help: 'Reference power over the last window, dB re full scale.', registers: [this.registry] });
  readonly weightMean = new Gauge({ name: 'tapwarden_weight_mean', help: 'Mean of the weights (full scale = 1).', labelNames: ['channel', 'path'], registers: [this.registry] });
  readonly weightNorm = new Gauge({ name: 'tapwarden_weight_norm', help: 'Euclidean norm of the weights.', labelNames: ['channel', 'path'], registers: [this.registry] });
  readonly weightMax = new Gauge({ name: 'tapwarden_weight_max_abs', help: 'Largest weight magnitude.', labelNames: ['channel', 'path'], registers: [this.registry] });
  readonly streamUp = new Gauge({ name: 'tapwarden_stream_up', help: '1 while the input stream delivers data, else 0.', registers: [this.registry] });
  readonly adapting = new Gauge({ name: 'tapwarden_adaptation_enabled', help: '1 while the adaptive path adapts, 0 while frozen.', labelNames: ['channel'], registers: [this.registry] });
  readonly handoffsEnabled = new Gauge({ name: 'tapwarden_handoffs_enabled', help: '1 while handoffs may happen, 0 while frozen.', labelNames: ['channel'], registers: [this.registry] });
  readonly cleanVersion = new Gauge({ name: 'tapwarden_clean_weights_version', help: 'Versions the clean path has taken since start (handoffs, restores, resets).', labelNames: ['channel'], registers: [this.registry] });
  readonly feedClients = new Gauge({ name: 'tapwarden_feed_clients', help: 'Connected WebSocket feed clients.', registers: [this.registry] });
  readonly feedDropped = new Counter({ name: 'tapwarden_feed_dropped_messages_total', help: 'Feed messages not sent to a client that had fallen behind.', registers: [this.registry] });
  readonly feedRefused = new Counter({
    name: 'tapwarden_feed_refused_messages_total',
    help: 'Client messages the feed refused: over the rate limit, too large, or not understood.',
    labelNames: ['why'],
    registers: [this.registry],
  });
  readonly feedRefusedConnections = new Counter({ name: 'tapwarden_feed_refused_connections_total', help: 'Feed connections refused because feed.maxClients were connected.', registers: [this.registry] });
  readonly weightMeanLimit = new Gauge({ name: 'tapwarden_weight_mean_limit', help: 'The supervisor bound on |weight mean| (supervisor.maxWeightMean).', registers: [this.registry] });
  readonly weightLimit = new Gauge({ name: 'tapwarden_weight_limit', help: 'The largest |w| the arithmetic stores (1 in fixed point, filter.weightLimit in float).', registers: [this.registry] });
  readonly limitEta = new Gauge({
    name: 'tapwarden_weight_limit_eta_seconds',
    help: 'Forecast seconds until an adaptive tap reaches the weight limit at its current drift (+Inf when none is drifting toward it).',
    labelNames: ['channel'],
    registers: [this.registry],
  });
  readonly limitEtaLow = new Gauge({
    name: 'tapwarden_weight_limit_eta_low_seconds',
    help: 'The early end of that forecast: every drifting tap two standard errors faster (+Inf when none is drifting).',
    labelNames: ['channel'],
    registers: [this.registry],
  });
  readonly meanBoundEta = new Gauge({
    name: 'tapwarden_weight_mean_bound_eta_seconds',
    help: 'Forecast seconds until |adaptive weight mean| reaches supervisor.maxWeightMean (+Inf when not rising).',
    labelNames: ['channel'],
    registers: [this.registry],
  });
  readonly captures = new Counter({ name: 'tapwarden_captures_total', help: 'Captured episodes written, by cause (an episode with several causes counts for each).', labelNames: ['cause'], registers: [this.registry] });
  readonly captureFailures = new Counter({ name: 'tapwarden_capture_write_failures_total', help: 'Captured episodes that could not be written.', registers: [this.registry] });
  readonly snapshots = new Counter({ name: 'tapwarden_snapshot_writes_total', help: 'Weight snapshot writes by result.', labelNames: ['result'], registers: [this.registry] });

  constructor(telemetry: Telemetry, measured: readonly number[]) {
    this.channels = measured.map(String);
    // The event-loop delay histogram samples every 100 ms (the default 10 ms wakes the main thread
    // a hundred times a second for it).
    collectDefaultMetrics({ register: this.registry, eventLoopMonitoringPrecision: 100 });
    // prom-client exports these gauges with a `_total` suffix, which Prometheus reserves for
    // counters (promtool check metrics flags them); their *_total-free siblings stay.
    for (const name of ['nodejs_active_handles_total', 'nodejs_active_requests_total', 'nodejs_active_resources_total']) {
      this.registry.removeSingleMetric(name);
    }
    const r = this.registry;
    const one = (slot: Slot): Sample[] => [{ labels: {}, value: telemetry.get(slot) }];
    const perChannel = (slot: ChannelSlot, labels: Record<string, string> = {}): Sample[] =>
      this.channels.map((channel, i) => ({ labels: { channel, ...labels }, value: telemetry.getChannel(i, slot) }));
    external(r, 'tapwarden_samples_processed_total', 'Samples (frames) processed by the engine.', 'counter', () => one('samples'));
    external(r, 'tapwarden_blocks_processed_total', 'Blocks processed by the engine.', 'counter', () => one('blocks'));
    external(r, 'tapwarden_stream_seconds', 'Seconds of stream the engine has processed since start.', 'gauge', () => one('streamSeconds'));
    external(r, 'tapwarden_block_processing_seconds', 'Time the engine took per block, in seconds.', 'histogram', () => {
      const counts = telemetry.bucketCounts();
      let cumulative = 0;
      const values: Sample[] = BLOCK_SECONDS_BUCKETS.map((le, i) => {
        cumulative += counts[i]!;
        return { metricName: 'tapwarden_block_processing_seconds_bucket', labels: { le }, value: cumulative };
      });
      cumulative += counts.at(-1)!;
      values.push({ metricName: 'tapwarden_block_processing_seconds_bucket', labels: { le: '+Inf' }, value: cumulative });
      values.push({ metricName: 'tapwarden_block_processing_seconds_sum', labels: {}, value: telemetry.get('blockSecondsSum') });
      values.push({ metricName: 'tapwarden_block_processing_seconds_count', labels: {}, value: cumulative });
      return values;
    });
    external(r, 'tapwarden_saturations_total', 'Stores that clipped, by path and by what clipped: weights (the drift symptom) or signal (inputs, outputs, error: a level problem).', 'counter', () => [
      ...perChannel('adaptiveWeightSaturations', { path: 'adaptive', store: 'weights' }),
      ...perChannel('adaptiveSignalSaturations', { path: 'adaptive', store: 'signal' }),
      ...perChannel('cleanSignalSaturations', { path: 'clean', store: 'signal' }),
    ]);
    external(r, 'tapwarden_nonfinite_input_samples_total', 'NaN or infinite input samples replaced by zero.', 'counter', () => perChannel('nonFiniteSamples'));
    external(r, 'tapwarden_outofrange_input_samples_total', 'Finite input samples beyond +-1000 full scale, clamped.', 'counter', () => perChannel('outOfRangeSamples'));
    external(r, 'tapwarden_queue_overruns_total', 'Input blocks dropped because the engine fell further behind than the queue holds.', 'counter', () => one('overruns'));
    external(r, 'tapwarden_queue_depth_blocks', 'Blocks waiting for the engine.', 'gauge', () => one('queueDepth'));
    external(r, 'tapwarden_queue_capacity_blocks', 'Blocks the input queue holds (stream.queueBlocks).', 'gauge', () => one('queueCapacity'));
    external(r, 'tapwarden_queue_underruns_total', 'Times playback drained before the next output block arrived (0 without playback).', 'counter', () => one('playbackUnderruns'));
    external(r, 'tapwarden_playback_dropped_blocks_total', 'Clean-output blocks not played because the playback queue was full (capture and playback clocks drifting apart).', 'counter', () =>
      one('playbackDroppedBlocks'),
    );
    const self = this;
    new Gauge({
      name: 'tapwarden_last_handoff_age_seconds',
      help: 'Seconds since the clean path last took weights (since start if never).',
      labelNames: ['channel'],
      registers: [this.registry],
      collect() {
        for (const ch of self.channels) this.labels(ch).set((Date.now() - (self.lastHandoffAt.get(ch) ?? self.startedAt)) / 1000);
      },
    });
    for (const c of CAPTURE_CAUSES) this.captures.labels(c).inc(0);
    for (const ch of this.channels) {
      for (const c of CRITERIA) this.rejected.labels(ch, c).inc(0);
      for (const o of ['accepted', 'pending', 'idle', 'rejected']) this.decisions.labels(ch, o).inc(0);
      this.accepted.labels(ch, 'supervisor').inc(0);
      this.resets.labels(ch).inc(0);
      this.settingsChanges.labels(ch).inc(0);
      this.cleanVersion.labels(ch).set(0);
      this.adapting.labels(ch).set(1);
      this.handoffsEnabled.labels(ch).set(1);
    }
  }

  /** The engine's flags as a control or weights reply states them. */
  applyReply(r: WeightsReply): void {
    for (const c of r.channels) {
      this.adapting.labels(String(c.channel)).set(c.adapting ? 1 : 0);
      this.handoffsEnabled.labels(String(c.channel)).set(c.handoffsHeld ? 0 : 1);
    }
  }

  onRecord(r: DecisionRecord): void {
    const ch = String(r.channel);
    for (const p of PATHS) {
      const f = r[p];
      this.errorPower.labels(ch, p).set(f.errorPowerDb);
      this.cancellation.labels(ch, p).set(f.cancellationDb);
      this.weightMean.labels(ch, p).set(f.weightMean);
      this.weightNorm.labels(ch, p).set(f.weightNorm);
      this.weightMax.labels(ch, p).set(f.maxAbsWeight);
    }
    this.desiredPower.labels(ch).set(r.desiredPowerDb);
    this.referencePower.set(r.referencePowerDb);
    this.decisions.labels(ch, r.outcome).inc();
    if (r.outcome === 'rejected') for (const c of r.failed) this.rejected.labels(ch, c).inc();
    const f = r.forecast;
    this.limitEta.labels(ch).set(f.limitEtaSeconds ?? Infinity);
    this.limitEtaLow.labels(ch).set(f.limitEtaLowSeconds ?? Infinity);
    this.meanBoundEta.labels(ch).set(f.meanBoundEtaSeconds ?? Infinity);
  }

  onEvent(e: RunEvent): void {
    const ch = String(e.channel);
    if (e.type === 'rollback') {
      this.rollbacks.labels(ch, e.reason).inc();
      return;
    }
    if (e.type === 'settings') {
      this.settingsChanges.labels(ch).inc();
      const bound = e.changes['supervisor.maxWeightMean'];
      if (bound !== undefined) this.weightMeanLimit.set(bound.to as number);
      return;
    }
    if (e.reason === 'supervisor' || e.reason === 'forced') this.accepted.labels(ch, e.reason).inc();
    if (e.reason === 'reset') this.resets.labels(ch).inc();
    this.lastHandoffAt.set(ch, Date.now());
    this.cleanVersion.labels(ch).set(e.version);
  }
}
