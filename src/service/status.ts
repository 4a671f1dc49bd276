import type { Config } from '../config/schema.js';
import type { DecisionRecord, RunEvent } from '../run/record.js';
import type { RunSink } from '../run/run.js';
import { VERSION } from '../version.js';
import type { WeightsReply } from './protocol.js';
import { withChanges } from './settings.js';
import type { Telemetry } from './telemetry.js';

/** Decision records kept for /api/status. */
const RECENT_DECISIONS = 20;

/**
 * What /api/status and the feed's status messages say: a sink of the run that keeps the last
 * record, the last few decisions and the last handoff, beside the stream's state, the operator's
 * flags and the worker's running counters.
 */
export class ServiceStatus implements RunSink {
  private readonly startedAt = Date.now();
  private last: DecisionRecord | null = null;
  private readonly recent: DecisionRecord[] = [];
  private lastHandoff: (RunEvent & { type: 'handoff'; at: string }) | null = null;
  private flags = { adapting: true, handoffsHeld: false, cleanVersion: 0 };
  streamUp = false;
  streamState = 'starting';

  constructor(
    private readonly config: Config,
    private readonly description: string,
    private readonly sampleRate: number,
    private readonly telemetry: Telemetry,
  ) {}

  onRecord(r: DecisionRecord): void {
    this.last = r;
    this.recent.unshift(r);
    if (this.recent.length > RECENT_DECISIONS) this.recent.length = RECENT_DECISIONS;
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
    this.lastHandoff = { ...e, at: new Date().toISOString() };
    this.flags = { ...this.flags, cleanVersion: e.version };
  }

  /** The engine's flags as a control or weights reply states them. */
  applyReply(r: WeightsReply): void {
    this.flags = { adapting: r.adapting, handoffsHeld: r.handoffsHeld, cleanVersion: r.cleanVersion };
  }

  setStream(up: boolean, state: string): void {
    this.streamUp = up;
    this.streamState = state;
  }

  private engine() {
    const t = this.telemetry;
    return {
      samples: t.get('samples'),
      blocks: t.get('blocks'),
      streamSeconds: t.get('streamSeconds'),
      ...this.flags,
      saturations: {
        adaptiveWeights: t.get('adaptiveWeightSaturations'),
        adaptiveSignal: t.get('adaptiveSignalSaturations'),
        cleanSignal: t.get('cleanSignalSaturations'),
      },
      nonFiniteSamples: t.get('nonFiniteSamples'),
      outOfRangeSamples: t.get('outOfRangeSamples'),
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
    return {
      version: VERSION,
      uptimeSeconds: (Date.now() - this.startedAt) / 1000,
      stream: this.stream(),
      filter: this.effective?.filter ?? this.config.filter,
      supervisor: this.effective?.supervisor ?? this.config.supervisor,
      pendingSettings: this.requested,
      engine: this.engine(),
      lastWindow: this.last,
      lastHandoff: this.lastHandoff,
      forecast: this.last?.forecast ?? null,
      recentDecisions: this.recent,
    };
  }

  /** The feed's status message body. */
  feedStatus(): object {
    return { time: new Date().toISOString(), stream: this.stream(), engine: this.engine(), lastWindow: this.last, lastHandoff: this.lastHandoff, forecast: this.last?.forecast ?? null };
  }
}
