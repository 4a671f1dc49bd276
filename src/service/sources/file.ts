import { EventEmitter } from 'node:events';
import type { Config } from '../../config/schema.js';
import { WavReader } from '../../io/wav/reader.js';
import type { Feeder, SourceEvents, StreamSource } from './source.js';

/**
 * A WAV file as a live stream: paced at its sample rate by the wall clock (or as fast as the
 * engine takes it), optionally looped. A pacer that falls behind catches up at once, as a real
 * capture would, and the engine's queue counts what it cannot take.
 */
export class FileSource extends EventEmitter<SourceEvents> implements StreamSource {
  readonly sampleRate: number;
  up = false;
  private reader: WavReader;
  private readonly channels: number[];
  private readonly blockFrames: number;
  private feeder: Feeder | null = null;
  private timer: NodeJS.Timeout | null = null;
  private startedAt = 0n;
  private emitted = 0;
  private stopped = false;

  constructor(
    readonly file: string,
    private readonly config: Config,
  ) {
    super();
    this.reader = WavReader.open(file);
    this.sampleRate = this.reader.format.sampleRate;
    this.channels = [config.input.referenceChannel, config.input.desiredChannel];
    this.blockFrames = config.stream.blockFrames;
  }

  get description(): string {
    const { pace, loop } = this.config.stream;
    return `file ${this.file} (${pace}${loop ? ', looped' : ''})`;
  }

  get warnings(): readonly string[] {
    return this.reader.warnings;
  }

  start(feeder: Feeder): void {
    this.feeder = feeder;
    this.startedAt = process.hrtime.bigint();
    this.setUp(true, 'streaming');
    this.tick();
  }

  private setUp(up: boolean, reason: string): void {
    if (this.up !== up) {
      this.up = up;
      this.emit('state', up, reason);
    }
  }

  private tick = (): void => {
    this.timer = null;
    if (this.stopped) return;
    const feeder = this.feeder!;
    if (this.config.stream.pace === 'free') {
      while (feeder.hasRoom && !this.stopped) if (!this.emitBlock()) return;
      if (!this.stopped) feeder.once('processed', this.tick);
      return;
    }
    const elapsed = Number(process.hrtime.bigint() - this.startedAt) / 1e9;
    const due = Math.floor(elapsed * this.sampleRate);
    while (due - this.emitted >= this.blockFrames) if (!this.emitBlock()) return;
    const blockMs = (1000 * this.blockFrames) / this.sampleRate;
    this.timer = setTimeout(this.tick, Math.max(1, blockMs / 2));
  };

  /** Reads and hands over one block; false when the file ended for good. */
  private emitBlock(): boolean {
    const n = this.blockFrames;
    const ref = new Float64Array(n);
    const des = new Float64Array(n);
    let got = this.reader.read(this.channels, [ref, des]);
    while (got < n && this.config.stream.loop && this.reader.frames > 0) {
      this.reader.close();
      this.reader = WavReader.open(this.file);
      const r = new Float64Array(n - got);
      const d = new Float64Array(n - got);
      const more = this.reader.read(this.channels, [r, d]);
      ref.set(r.subarray(0, more), got);
      des.set(d.subarray(0, more), got);
      got += more;
    }
    this.emitted += n;
    if (got > 0) this.feeder!.submit(ref, des, got);
    if (got < n) {
      this.setUp(false, 'the recording ended');
      this.stop();
      return false;
    }
    return true;
  }

  stop(): void {
    this.stopped = true;
    if (this.timer) clearTimeout(this.timer);
    this.reader.close();
  }
}
