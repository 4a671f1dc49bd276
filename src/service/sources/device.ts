import { EventEmitter } from 'node:events';
import type { Config } from '../../config/schema.js';
import { oneLine } from '../../errors.js';
import { openCapture, resolveDevice, type Capture } from '../../io/audio.js';
import type { Feeder, SourceEvents, StreamSource } from './source.js';

/** Seconds without data after which an open capture counts as stalled and is reopened. */
const STALL_SECONDS = 5;

/**
 * Live capture through PortAudio. 16-bit interleaved frames are cut into blocks of the
 * reference and desired channels. A device that fails, stalls or disappears is reported and
 * reopened after `retrySeconds`; the service keeps running meanwhile.
 */
export class DeviceSource extends EventEmitter<SourceEvents> implements StreamSource {
  readonly sampleRate: number;
  up = false;
  private feeder: Feeder | null = null;
  private capture: Capture | null = null;
  private ref = new Float64Array(0);
  private des = new Float64Array(0);
  private fill = 0;
  private lastData = 0;
  private retryTimer: NodeJS.Timeout | null = null;
  private watchdog: NodeJS.Timeout | null = null;
  private stopped = false;

  constructor(private readonly config: Config) {
    super();
    this.sampleRate = config.stream.device.sampleRate;
  }

  get description(): string {
    const d = this.config.stream.device;
    return `device ${d.input === null ? '(default)' : JSON.stringify(d.input)}, ${d.channels} channel(s) at ${d.sampleRate} Hz`;
  }

  start(feeder: Feeder): void {
    this.feeder = feeder;
    this.open();
    this.watchdog = setInterval(() => {
      if (this.capture !== null && Date.now() - this.lastData > STALL_SECONDS * 1000) this.fail(`no data for ${STALL_SECONDS} s`);
    }, 500);
  }

  private setUp(up: boolean, reason: string): void {
    if (this.up !== up) {
      this.up = up;
      this.emit('state', up, reason);
    }
  }

  private newBlock(): void {
    const n = this.config.stream.blockFrames;
    this.ref = new Float64Array(n);
    this.des = new Float64Array(n);
    this.fill = 0;
  }

  private open(): void {
    if (this.stopped) return;
    const d = this.config.stream.device;
    try {
      const deviceId = resolveDevice(d.input, 'input', d.channels);
      this.newBlock();
      this.lastData = Date.now();
      this.capture = openCapture({
        deviceId,
        channels: d.channels,
        sampleRate: d.sampleRate,
        framesPerBuffer: this.config.stream.blockFrames,
        onData: (b) => this.onData(b),
        onError: (m) => this.fail(m),
      });
      this.emit('state', false, `opened ${this.description}; waiting for the first samples`);
    } catch (err) {
      this.fail(oneLine(err));
    }
  }

  private fail(reason: string): void {
    this.capture?.stop();
    this.capture = null;
    this.emit('state', false, `${reason}; retrying in ${this.config.stream.device.retrySeconds} s`);
    this.up = false;
    if (!this.stopped && this.retryTimer === null) {
      this.retryTimer = setTimeout(() => {
        this.retryTimer = null;
        this.open();
      }, this.config.stream.device.retrySeconds * 1000);
    }
  }

  private onData(b: Buffer): void {
    if (this.feeder === null) return;
    this.lastData = Date.now();
    if (!this.up) this.setUp(true, `capturing from ${this.description}`);
    const channels = this.config.stream.device.channels;
    const rc = this.config.input.referenceChannel;
    const dc = this.config.input.desiredChannel;
    const frames = Math.floor(b.length / (2 * channels));
    const n = this.ref.length;
    for (let i = 0; i < frames; i++) {
      const at = i * channels * 2;
      this.ref[this.fill] = b.readInt16LE(at + rc * 2) / 32768;
      this.des[this.fill] = b.readInt16LE(at + dc * 2) / 32768;
      if (++this.fill === n) {
        this.feeder!.submit(this.ref, this.des, n);
        this.newBlock();
      }
    }
  }

  /**
   * Stops delivering blocks. The capture stream is left to the process's exit: stopping a
   * PortAudio stream joins its reader thread, which can sit in a blocked driver read forever.
   */
  stop(): void {
    this.stopped = true;
    if (this.retryTimer) clearTimeout(this.retryTimer);
    if (this.watchdog) clearInterval(this.watchdog);
    this.feeder = null;
  }
}
