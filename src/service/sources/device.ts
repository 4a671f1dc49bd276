import { fork, type ChildProcess } from 'node:child_process';
import type { Readable } from 'node:stream';
import { measurementChannels, referenceChannels, type Config } from '../../config/schema.js';
import type { Telemetry } from '../telemetry.js';
import type { SourceCallbacks, StreamSource } from './source.js';

/** Seconds without data after which an open capture counts as stalled and is reopened. */
const STALL_SECONDS = 5;
export const AUDIO_CHILD = new URL('../../io/audioChild.js', import.meta.url);

/**
 * Live capture through PortAudio, in a child process (src/io/audioChild.ts) started from the
 * engine worker: 16-bit interleaved frames arrive on a pipe straight into the worker, which cuts
 * them into blocks of the reference and desired channels. A device that fails, stalls or
 * disappears is reported and reopened after stream.device.retrySeconds; a child that cannot be
 * stopped is killed.
 */
export class DeviceSource implements StreamSource {
  private child: ChildProcess | null = null;
  private readonly refs: Float64Array[];
  private readonly des: Float64Array[];
  /** Byte offsets in a frame of each reference and each measurement channel. */
  private readonly refAt: number[];
  private readonly desAt: number[];
  private fill = 0;
  /** A frame split across two pipe reads. */
  private carry: Buffer = Buffer.alloc(0);
  private lastData = 0;
  private retryTimer: NodeJS.Timeout | null = null;
  private watchdog: NodeJS.Timeout | null = null;
  private stopped = false;

  constructor(
    private readonly config: Config,
    private readonly telemetry: Telemetry,
    private readonly cb: SourceCallbacks,
  ) {
    this.refs = referenceChannels(config).map(() => new Float64Array(config.stream.blockFrames));
    this.des = measurementChannels(config).map(() => new Float64Array(config.stream.blockFrames));
    this.refAt = referenceChannels(config).map((c) => 2 * c);
    this.desAt = measurementChannels(config).map((c) => 2 * c);
    telemetry.set('queueCapacity', config.stream.queueBlocks);
  }

  get description(): string {
    const d = this.config.stream.device;
    return `device ${d.input === null ? '(default)' : JSON.stringify(d.input)}, ${d.channels} channel(s) at ${d.sampleRate} Hz`;
  }

  start(): void {
    this.open();
    this.watchdog = setInterval(() => {
      if (this.child !== null && Date.now() - this.lastData > STALL_SECONDS * 1000) this.fail(`no data for ${STALL_SECONDS} s`);
    }, 500);
  }

  private setUp(up: boolean, reason: string): void {
    this.cb.state(up, reason);
  }

  private open(): void {
    if (this.stopped) return;
    const d = this.config.stream.device;
    const frameBytes = 2 * d.channels;
    const options = {
      device: d.input,
      channels: d.channels,
      sampleRate: d.sampleRate,
      framesPerBuffer: this.config.stream.blockFrames,
      maxQueueBytes: this.config.stream.queueBlocks * this.config.stream.blockFrames * frameBytes,
    };
    this.fill = 0;
    this.carry = Buffer.alloc(0);
    this.lastData = Date.now();
    // stdout and stderr of the child are this process's stderr: PortAudio's status lines stay
    // out of the JSON log on stdout.
    const child = fork(AUDIO_CHILD, ['capture', JSON.stringify(options)], { stdio: ['ignore', 2, 2, 'ipc', 'pipe'], serialization: 'json' });
    this.child = child;
    child.on('message', (m: { t: string; message?: string; bytes?: number }) => {
      if (m.t === 'up') this.setUp(true, `capturing from ${this.description}`);
      else if (m.t === 'overrun') this.telemetry.add('overruns', Math.max(1, Math.round((m.bytes ?? 0) / (frameBytes * this.config.stream.blockFrames))));
      else if (m.t === 'error') this.fail(m.message ?? 'the capture failed');
    });
    child.on('exit', (code) => {
      if (this.child === child) this.fail(`the capture process exited (${code})`);
    });
    (child.stdio[4] as Readable).on('data', (b: Buffer) => this.onData(b, frameBytes));
    this.cb.state(false, `opened ${this.description}; waiting for the first samples`);
  }

  private fail(reason: string): void {
    const child = this.child;
    this.child = null;
    child?.kill('SIGKILL');
    this.setUp(false, `${reason}; retrying in ${this.config.stream.device.retrySeconds} s`);
    if (!this.stopped && this.retryTimer === null) {
      this.retryTimer = setTimeout(() => {
        this.retryTimer = null;
        this.open();
      }, this.config.stream.device.retrySeconds * 1000);
    }
  }

  private onData(chunk: Buffer, frameBytes: number): void {
    if (this.stopped) return;
    this.lastData = Date.now();
    const b = this.carry.length > 0 ? Buffer.concat([this.carry, chunk]) : chunk;
    const frames = Math.floor(b.length / frameBytes);
    const { refAt, desAt, refs, des } = this;
    const n = refs[0]!.length;
    for (let i = 0; i < frames; i++) {
      const at = i * frameBytes;
      for (let c = 0; c < refs.length; c++) refs[c]![this.fill] = b.readInt16LE(at + refAt[c]!) / 32768;
      for (let c = 0; c < des.length; c++) des[c]![this.fill] = b.readInt16LE(at + desAt[c]!) / 32768;
      if (++this.fill === n) {
        this.fill = 0;
        this.cb.block(this.refs, this.des, n);
      }
    }
    this.carry = b.subarray(frames * frameBytes);
  }

  stop(): void {
    if (this.stopped) return;
    this.stopped = true;
    if (this.retryTimer) clearTimeout(this.retryTimer);
    if (this.watchdog) clearInterval(this.watchdog);
    const child = this.child;
    this.child = null;
    child?.kill('SIGKILL');
  }
}
