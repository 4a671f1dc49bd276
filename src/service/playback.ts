import { fork, type ChildProcess } from 'node:child_process';
import type { Writable } from 'node:stream';
import type { Config } from '../config/schema.js';
import type { RunSink } from '../run/run.js';
import { AUDIO_CHILD } from './sources/device.js';
import type { Telemetry } from './telemetry.js';

/** Blocks of clean output that may wait for the playback device; beyond that, blocks are dropped. */
const PLAYBACK_QUEUE_BLOCKS = 8;

/**
 * Plays the clean output on a device, hard-limited to stream.device.playbackPeakDb, from the
 * engine worker through a playback child process (src/io/audioChild.ts). The limit is a safety
 * clamp, not a mastering limiter: it keeps a diverged filter or a fault burst from reaching full
 * scale in someone's ears or on an actuator. Capture and playback clocks drift apart on a long
 * trial; the queue toward the device is capped and every block dropped for it is counted.
 */
export class Playback implements RunSink {
  private child: ChildProcess | null;
  private readonly stdin: Writable;
  private readonly full: number;
  private buf = Buffer.alloc(0);
  private readonly maxQueueBytes: number;

  constructor(
    config: Config,
    sampleRate: number,
    private readonly telemetry: Telemetry,
    onProblem: (message: string) => void,
  ) {
    this.full = 10 ** (config.stream.device.playbackPeakDb / 20) * 32767;
    this.maxQueueBytes = PLAYBACK_QUEUE_BLOCKS * config.stream.blockFrames * 2;
    const options = { device: config.stream.device.playback, sampleRate, maxQueueBytes: this.maxQueueBytes, blockBytes: 2 * config.stream.blockFrames };
    const child = fork(AUDIO_CHILD, ['playback', JSON.stringify(options)], { stdio: ['pipe', 2, 2, 'ipc'], serialization: 'json' });
    this.child = child;
    this.stdin = child.stdin!;
    this.stdin.on('error', () => {});
    child.on('message', (m: { t: string; message?: string; blocks?: number }) => {
      if (m.t === 'underrun') telemetry.add('playbackUnderruns', 1);
      else if (m.t === 'dropped') telemetry.add('playbackDroppedBlocks', m.blocks ?? 1);
      else if (m.t === 'error') onProblem(m.message ?? 'playback failed');
    });
    child.on('exit', (code) => {
      if (this.child !== null) onProblem(`the playback process exited (${code})`);
      this.child = null;
    });
  }

  onBlock(clean: Float64Array, _adaptive: Float64Array, n: number): void {
    // Not played (the device is gone, or too far behind): counted either way.
    if (this.child === null || this.stdin.writableLength + 2 * n > this.maxQueueBytes) {
      this.telemetry.add('playbackDroppedBlocks', 1);
      return;
    }
    if (this.buf.length < 2 * n) this.buf = Buffer.alloc(2 * n);
    const full = this.full;
    for (let i = 0; i < n; i++) {
      const v = Math.round(clean[i]! * 32768);
      this.buf.writeInt16LE(v > full ? Math.floor(full) : v < -full ? -Math.floor(full) : v === v ? v : 0, 2 * i);
    }
    // A copy: the pipe may hold the buffer after write() returns.
    this.stdin.write(Buffer.from(this.buf.subarray(0, 2 * n)));
  }

  stop(): void {
    const child = this.child;
    this.child = null;
    this.stdin.end();
    setTimeout(() => child?.kill('SIGKILL'), 500).unref();
  }
}
