import { measurementChannels, referenceChannels, type CaptureCause, type Config } from '../config/schema.js';
import type { EngineSettings } from '../engine/dualPath.js';
import type { CaptureCauseRecord } from '../run/capture.js';
import type { DecisionRecord } from '../run/record.js';
import type { Run, RunSink } from '../run/run.js';
import type { RunState } from '../run/state.js';

/** A finished episode, handed to the main thread to be written. */
export interface Episode {
  readonly startSample: number;
  readonly frames: number;
  /** The WAV's channels (index = input channel; channels the runs do not use are zeros). */
  readonly channels: Float64Array[];
  readonly causes: CaptureCauseRecord[];
  readonly runs: { channel: number; state: RunState; pendingSettings: EngineSettings | null }[];
  /** The settings in effect at the first frame (the same for every channel). */
  readonly settings: EngineSettings;
}

interface Keyframe {
  readonly sample: number;
  readonly runs: Episode['runs'];
  readonly settings: EngineSettings;
}

/**
 * The engine worker's side of captured episodes: a rolling buffer of the input channels the runs
 * use, and every `keyframe` seconds of stream, between two blocks, each run's exact state
 * (src/run/state.ts). A cause picks the newest keyframe at least capture.secondsBefore before it
 * as the episode's first frame, and the episode closes capture.secondsAfter after the cause;
 * causes that come while one is open join it. Refused windows and forecast alerts count when
 * they begin (a run of refused windows is one cause), per channel.
 */
export class CaptureRecorder {
  private readonly rate: number;
  private readonly before: number;
  private readonly after: number;
  private readonly keyframeEvery: number;
  private readonly size: number;
  /** Ring per used input channel, indexed by input channel (null: not used). */
  private readonly rings: (Float64Array | null)[];
  private readonly used: number[];
  private readonly keyframes: Keyframe[] = [];
  private nextKeyframe = 0;
  private open: { start: Keyframe; end: number; causes: CaptureCauseRecord[] } | null = null;
  private readonly inAlarm = new Map<string, boolean>();
  private now = 0;
  private runs: readonly Run[] = [];

  constructor(
    private readonly config: Config,
    sampleRate: number,
    private readonly done: (e: Episode) => void,
  ) {
    const c = config.capture;
    this.rate = sampleRate;
    this.before = Math.round(c.secondsBefore * sampleRate);
    this.after = Math.round(c.secondsAfter * sampleRate);
    this.keyframeEvery = Math.max(config.stream.blockFrames, Math.round(this.before / 4));
    // Enough for the oldest keyframe a cause may pick, the episode after it, and a block of slack.
    this.size = this.before + 2 * this.keyframeEvery + this.after + 2 * config.stream.blockFrames;
    this.used = [...referenceChannels(config), ...measurementChannels(config)];
    const width = Math.max(...this.used) + 1;
    this.rings = Array.from({ length: width }, (_, ch) => (this.used.includes(ch) ? new Float64Array(this.size) : null));
  }

  /** The runs whose state the keyframes hold (each built with this recorder's sinkFor). */
  attach(runs: readonly Run[]): void {
    this.runs = runs;
  }

  /** Before the runs process a block that starts at stream sample `at`: a keyframe when due. */
  beforeBlock(at: number): void {
    this.now = at;
    if (at < this.nextKeyframe) return;
    this.nextKeyframe = at + this.keyframeEvery;
    const frame: Keyframe = {
      sample: at,
      runs: this.runs.map((r) => ({ channel: r.channel, state: r.exportState(), pendingSettings: r.engine.queuedSettings })),
      settings: this.runs[0]!.settings,
    };
    this.keyframes.push(frame);
    // Keep what a cause could still pick, and the open episode's own.
    const oldest = at - this.before - this.keyframeEvery;
    while (this.keyframes.length > 2 && this.keyframes[1]!.sample <= oldest && this.keyframes[0] !== this.open?.start) this.keyframes.shift();
  }

  /** After the block: its input into the rings, and an episode that is complete goes out. */
  afterBlock(refs: readonly Float64Array[], des: readonly Float64Array[], n: number): void {
    const at = this.now;
    const { size } = this;
    const K = refs.length;
    for (let c = 0; c < this.used.length; c++) {
      const ring = this.rings[this.used[c]!]!;
      const src = c < K ? refs[c]! : des[c - K]!;
      for (let i = 0, p = at % size; i < n; i++, p = p + 1 === size ? 0 : p + 1) ring[p] = src[i]!;
    }
    this.now = at + n;
    if (this.open !== null && this.now >= this.open.end) this.close();
  }

  /** A cause at stream sample `sample` (a decision's window end, or now for a mark). */
  cause(cause: CaptureCause, channel: number | null, sample: number, note: string | null, decision: DecisionRecord | null): void {
    if (!this.config.capture.triggers.includes(cause)) return;
    const record: CaptureCauseRecord = { cause, channel, sample, streamSeconds: sample / this.rate, note, decision };
    if (this.open !== null) {
      this.open.causes.push(record);
      return;
    }
    const want = sample - this.before;
    let start = this.keyframes[0];
    for (const k of this.keyframes) if (k.sample <= want) start = k;
    if (start === undefined) return; // no block processed yet
    this.open = { start, end: sample + this.after, causes: [record] };
  }

  private close(): void {
    const { start, causes } = this.open!;
    this.open = null;
    const end = this.now;
    const frames = end - start.sample;
    const channels = this.rings.map((ring) => {
      const out = new Float64Array(frames);
      if (ring === null) return out;
      for (let i = 0, p = start.sample % this.size; i < frames; i++, p = p + 1 === this.size ? 0 : p + 1) out[i] = ring[p]!;
      return out;
    });
    this.done({ startSample: start.sample, frames, channels, causes, runs: start.runs, settings: start.settings });
  }

  /** The run sink of one channel: refused windows and forecast alerts as causes, when they begin. */
  sinkFor(channel: number): RunSink {
    const limit = this.config.capture.forecastSeconds;
    return {
      onRecord: (r) => {
        this.edge(`refused:${channel}`, r.outcome === 'rejected', () => this.cause('refused', channel, r.sample, null, r));
        const eta = r.forecast.limitEtaSeconds;
        this.edge(`forecast:${channel}`, eta !== null && eta < limit, () => this.cause('forecast', channel, r.sample, null, r));
      },
    };
  }

  private edge(key: string, on: boolean, fire: () => void): void {
    if (on && !this.inAlarm.get(key)) fire();
    this.inAlarm.set(key, on);
  }

  /** An operator mark now. */
  mark(note: string | null, channel: number | null): void {
    this.cause('mark', channel, this.now, note, null);
  }
}
