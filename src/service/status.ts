import { measurementChannels, type Config } from '../config/schema.js';
import type { DecisionRecord, RunEvent } from '../run/record.js';
import type { RunSink } from '../run/run.js';
import { VERSION } from '../version.js';
import type { WeightsReply } from './protocol.js';
import { withChanges } from './settings.js';
import type { Telemetry } from './telemetry.js';

/** Decision records kept for /api/status. */
const RECENT_DECISIONS = 20;

/** One measurement channel's side of the status. */
class ChannelStatus {
  last: DecisionRecord | null = null;
  readonly recent: DecisionRecord[] = [];
  lastHandoff: (RunEvent & { type: 'handoff'; at: string }) | null = null;
  flags = { adapting: true, handoffsHeld: false, cleanVersion: 0 };

  constructor(
    readonly channel: number,
    private readonly index: number,
    private readonly telemetry: Telemetry,
  ) {}

  counters() {
    const t = this.telemetry;
    const i = this.index;
    return {
      /** Samples this channel's run has processed (behind the stream while its thread catches up). */
      samples: t.getChannel(i, 'samples'),
      ...this.flags,
      saturations: {
        adaptiveWeights: t.getChannel(i, 'adaptiveWeightSaturations'),
        adaptiveSignal: t.getChannel(i, 'adaptiveSignalSaturations'),
        cleanSignal: t.getChannel(i, 'cleanSignalSaturations'),
      },
      nonFiniteSamples: t.getChannel(i, 'nonFiniteSamples'),
      outOfRangeSamples: t.getChannel(i, 'outOfRangeSamples'),
    };
  }

  view() {
    return {
      channel: this.channel,
      ...this.counters(),
      lastWindow: this.last,
      lastHandoff: this.lastHandoff,
      forecast: this.last?.forecast ?? null,
      recentDecisions: this.recent,
    };
  }
}

/**
 * What /api/status and the feed's status messages say: a sink of the runs that keeps, per
 * measurement channel, the last record, the last few decisions, the last handoff and the
 * operator's flags, beside the stream's state and the worker's running counters. The top-level
 * engine figures, last window and forecast are the first channel's (the whole status with one).
 */
export class ServiceStatus implements RunSink {
  private readonly startedAt = Date.now();
  private readonly channels: ChannelStatus[];
  streamUp = false;
  streamState = 'starting';

  constructor(
    private readonly config: Config,
    private readonly description: string,
    private readonly sampleRate: number,
    private readonly telemetry: Telemetry,
  ) {
    this.channels = measurementChannels(config).map((c, i) => new ChannelStatus(c, i, telemetry));
  }

  private of(channel: number): ChannelStatus {
    return this.channels.find((c) => c.channel === channel) ?? this.channels[0]!;
  }

  onRecord(r: DecisionRecord): void {
    const c = this.of(r.channel);
    c.last = r;
    c.recent.unshift(r);
    if (c.recent.length > RECENT_DECISIONS) c.recent.length = RECENT_DECISIONS;
  }

  /** The live settings (filter step, leak, leakShift, meanRemovalEvery; supervisor) in effect, and any accepted but not yet in effect. */
  private effective: { filter: Record<string, unknown>; supervisor: Record<string, unknown> } | null = null;
  private requested: { filter: Record<string, unknown>; supervisor: object } | null = null;

  setRequestedSettings(s: { filter: Record<string, unknown>; supervisor: object }): void {
    this.requested = s;
  }

  onEvent(e: RunEvent): void {
    if (e.type === 'settings') {
      this.effective = withChanges(this.effective ?? this.config, e.changes);
      this.requested = null;
      return;
    }
    if (e.type !== 'handoff') return;
    const c = this.of(e.channel);
    c.lastHandoff = { ...e, at: new Date().toISOString() };
    c.flags = { ...c.flags, cleanVersion: e.version };
  }

  /** The engine's flags as a control or weights reply states them. */
  applyReply(r: WeightsReply): void {
    for (const x of r.channels) this.of(x.channel).flags = { adapting: x.adapting, handoffsHeld: x.handoffsHeld, cleanVersion: x.cleanVersion };
  }

  setStream(up: boolean, state: string): void {
    this.streamUp = up;
    this.streamState = state;
  }

  private engine() {
    const t = this.telemetry;
    return {
      ...this.channels[0]!.counters(),
      samples: t.get('samples'),
      blocks: t.get('blocks'),
      streamSeconds: t.get('streamSeconds'),
      queue: {
        depth: t.get('queueDepth'),
        capacity: t.get('queueCapacity'),
        overruns: t.get('overruns'),
        underruns: t.get('playbackUnderruns'),
        playbackDropped: t.get('playbackDroppedBlocks'),
      },
    };
  }

  private stream() {
    return { source: this.config.stream.source, description: this.description, up: this.streamUp, state: this.streamState, sampleRate: this.sampleRate };
  }

  /** GET /api/status. */
  status(): object {
    const first = this.channels[0]!;
    return {
      version: VERSION,
      uptimeSeconds: (Date.now() - this.startedAt) / 1000,
      stream: this.stream(),
      filter: this.effective?.filter ?? this.config.filter,
      supervisor: this.effective?.supervisor ?? this.config.supervisor,
      pendingSettings: this.requested,
      engine: this.engine(),
      lastWindow: first.last,
      lastHandoff: first.lastHandoff,
      forecast: first.last?.forecast ?? null,
      recentDecisions: first.recent,
      channels: this.channels.map((c) => c.view()),
    };
  }

  /**
   * The feed's status message body: each channel's counters and flags (its windows and handoffs
   * reach the feed as its own tagged records and events).
   */
  feedStatus(): object {
    const first = this.channels[0]!;
    return {
      time: new Date().toISOString(),
      stream: this.stream(),
      engine: this.engine(),
      lastWindow: first.last,
      lastHandoff: first.lastHandoff,
      forecast: first.last?.forecast ?? null,
      channels: this.channels.map((c) => ({ channel: c.channel, ...c.counters() })),
    };
  }
}
