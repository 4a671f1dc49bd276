import type { Config } from '../config/schema.js';
import { openPlayback, resolveDevice, type Playback as Stream } from '../io/audio.js';
import type { ServiceMetrics } from './metrics.js';

/**
 * Plays the clean output on a device, hard-limited to stream.device.playbackPeakDb. The limit is
 * a safety clamp, not a mastering limiter: it keeps a diverged filter or a fault burst from
 * reaching full scale in someone's ears or on an actuator.
 */
export class Playback {
  underruns = 0;
  private stream: Stream | null = null;
  private readonly peak: number;
  private blocksWritten = 0;

  constructor(
    config: Config,
    sampleRate: number,
    private readonly metrics: ServiceMetrics,
    onProblem: (message: string) => void,
  ) {
    this.peak = 10 ** (config.stream.device.playbackPeakDb / 20);
    try {
      const id = resolveDevice(config.stream.device.playback, 'output', 1);
      this.stream = openPlayback({ deviceId: id, sampleRate, onError: onProblem });
    } catch (err) {
      onProblem((err as Error).message);
    }
  }

  play(block: Float64Array): void {
    if (this.stream === null) return;
    // The device drained everything queued before this block came: an underrun.
    if (this.blocksWritten > 4 && this.stream.queuedBytes === 0) {
      this.underruns++;
      this.metrics.underruns.inc();
    }
    const b = Buffer.alloc(block.length * 2);
    const full = this.peak * 32767;
    for (let i = 0; i < block.length; i++) {
      const v = Math.max(-full, Math.min(full, Math.round(block[i]! * 32768)));
      b.writeInt16LE(Number.isFinite(v) ? v : 0, i * 2);
    }
    this.stream.write(b);
    this.blocksWritten++;
  }

  stop(): void {
    this.stream?.stop();
    this.stream = null;
  }
}
