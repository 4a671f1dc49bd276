import { measurementChannels, referenceChannels, type Config } from '../../config/schema.js';
import { WavReader } from '../../io/wav/reader.js';
import type { Telemetry } from '../telemetry.js';
import type { SourceCallbacks, StreamSource } from './source.js';

/**
 * How often a paced source wakes at most: the blocks that came due meanwhile go out together,
 * as a capture device's driver hands over its periods (two wake-ups per 256-frame block at 48
 * kHz cost the worker several times the engine at 256 taps: README "Sizing a rig").
 */
const PACE_MS = 20;
/** Wall time a free-running source works before it lets the worker's messages through. */
const FREE_SLICE_MS = 5;

/**
 * A WAV file as a live stream, inside the engine worker: paced at its sample rate by the worker's
 * own clock (or as fast as the engine goes), optionally looped. A pacer that falls behind by
 * more than stream.queueBlocks blocks drops the excess, as a capture device's buffer would, and
 * counts the dropped blocks as overruns; nothing on the main thread can delay it.
 */
export class FileSource implements StreamSource {
  private readonly reader: WavReader;
  private readonly channels: number[];
  private readonly blockFrames: number;
  private readonly refs: Float64Array[];
  private readonly des: Float64Array[];
  /** The references' and measurements' arrays in read order. */
  private readonly all: Float64Array[];
  private timer: NodeJS.Timeout | NodeJS.Immediate | null = null;
  private startedAt = 0n;
  /** Frames handed over or dropped since start (the stream position). */
  private emitted = 0;
  private stopped = false;

  constructor(
    readonly file: string,
    private readonly config: Config,
    private readonly telemetry: Telemetry,
    private readonly cb: SourceCallbacks,
  ) {
    this.reader = WavReader.open(file);
    const measured = measurementChannels(config);
    this.channels = [...referenceChannels(config), ...measured];
    this.blockFrames = config.stream.blockFrames;
    this.refs = referenceChannels(config).map(() => new Float64Array(this.blockFrames));
    this.des = measured.map(() => new Float64Array(this.blockFrames));
    this.all = [...this.refs, ...this.des];
    telemetry.set('queueCapacity', config.stream.queueBlocks);
  }

  get description(): string {
    const { pace, loop } = this.config.stream;
    return `file ${this.file} (${pace}${loop ? ', looped' : ''})`;
  }

  get sampleRate(): number {
    return this.reader.format.sampleRate;
  }

  start(): void {
    this.startedAt = process.hrtime.bigint();
    this.cb.state(true, 'streaming');
    this.schedule(0);
  }

  private schedule(ms: number): void {
    if (this.stopped) return;
    this.timer = this.config.stream.pace === 'free' ? setImmediate(this.tick) : setTimeout(this.tick, ms);
  }

  private readonly tick = (): void => {
    this.timer = null;
    if (this.stopped) return;
    if (this.config.stream.pace === 'free') {
      const until = performance.now() + FREE_SLICE_MS;
      while (performance.now() < until) if (!this.emitBlock()) return;
      this.schedule(0);
      return;
    }
    const elapsed = Number(process.hrtime.bigint() - this.startedAt) / 1e9;
    const due = Math.floor(elapsed * this.sampleRate);
    const n = this.blockFrames;
    const cap = this.config.stream.queueBlocks;
    let behind = Math.floor((due - this.emitted) / n);
    if (behind > cap) {
      // The engine fell behind by more than the queue holds: those blocks are lost.
      this.skip((behind - cap) * n);
      this.telemetry.add('overruns', behind - cap);
      behind = cap;
    }
    this.telemetry.set('queueDepth', Math.max(0, behind));
    for (let b = 0; b < behind; b++) if (!this.emitBlock()) return;
    this.telemetry.set('queueDepth', 0);
    this.schedule(Math.max(PACE_MS, (500 * n) / this.sampleRate));
  };

  /** Reads `frames` frames past (looping as the stream would) without handing them over. */
  private skip(frames: number): void {
    let left = frames;
    while (left > 0) {
      const m = Math.min(left, this.reader.remaining);
      this.reader.seek(this.reader.position + m);
      left -= m;
      this.emitted += m;
      if (this.reader.remaining === 0) {
        if (!this.config.stream.loop) return;
        this.reader.seek(0);
      }
    }
  }

  /** Reads and hands over one block; false when the file ended for good. */
  private emitBlock(): boolean {
    const n = this.blockFrames;
    const all = this.all;
    let got = this.reader.read(this.channels, all);
    while (got < n && this.config.stream.loop && this.reader.frames > 0) {
      this.reader.seek(0);
      const from = got;
      got += this.reader.read(this.channels, all.map((a) => a.subarray(from)));
    }
    this.emitted += n;
    if (got > 0) this.cb.block(this.refs, this.des, got);
    if (got < n) {
      this.stop();
      this.cb.state(false, 'the recording ended');
      this.cb.ended();
      return false;
    }
    return true;
  }

  stop(): void {
    if (this.stopped) return;
    this.stopped = true;
    if (this.timer !== null) {
      clearTimeout(this.timer as NodeJS.Timeout);
      clearImmediate(this.timer as NodeJS.Immediate);
    }
    this.reader.close();
  }
}
