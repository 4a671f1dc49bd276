import { closeSync, openSync, writeSync } from 'node:fs';
import type { OutputEncoding } from '../config/schema.js';
import { TapwardenError, oneLine } from '../errors.js';
import { WavWriter } from '../io/wav/writer.js';
import type { DecisionRecord, RunEvent } from './record.js';
import type { RunSink } from './run.js';

/** Bytes buffered before the decision log is written out. */
const LOG_BUFFER = 1 << 16;

/**
 * The decision log: every record and event as one JSON line (NDJSON), written as the run goes,
 * so it holds the full history at any length while the process holds only a small buffer.
 */
export class DecisionLog implements RunSink {
  private readonly fd: number;
  private pending = '';

  constructor(readonly file: string) {
    try {
      this.fd = openSync(file, 'w');
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file, reason: oneLine(err) });
    }
  }

  onRecord(r: DecisionRecord): void {
    this.line(r);
  }

  onEvent(e: RunEvent): void {
    this.line(e);
  }

  private line(v: object): void {
    this.pending += JSON.stringify(v) + '\n';
    if (this.pending.length >= LOG_BUFFER) this.flush();
  }

  flush(): void {
    if (this.pending.length === 0) return;
    try {
      writeSync(this.fd, this.pending);
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: this.file, reason: oneLine(err) });
    }
    this.pending = '';
  }

  close(): void {
    this.flush();
    closeSync(this.fd);
  }
}

/** The two output streams as mono WAV files: clean.wav and adaptive.wav. */
export class WavOutputs implements RunSink {
  readonly clean: WavWriter;
  readonly adaptive: WavWriter;
  private readonly cleanView: Float64Array[] = [new Float64Array(0)];
  private readonly adaptiveView: Float64Array[] = [new Float64Array(0)];

  constructor(cleanFile: string, adaptiveFile: string, sampleRate: number, encoding: OutputEncoding) {
    this.clean = new WavWriter(cleanFile, sampleRate, 1, encoding);
    this.adaptive = new WavWriter(adaptiveFile, sampleRate, 1, encoding);
  }

  onBlock(clean: Float64Array, adaptive: Float64Array, n: number): void {
    this.cleanView[0] = clean;
    this.adaptiveView[0] = adaptive;
    this.clean.write(this.cleanView, n);
    this.adaptive.write(this.adaptiveView, n);
  }

  /** Samples clipped (PCM) and non-finite samples written as 0, over both files. */
  get clippedSamples(): number {
    return this.clean.clipped + this.adaptive.clipped;
  }

  get nonFiniteSamples(): number {
    return this.clean.nonFinite + this.adaptive.nonFinite;
  }

  close(): void {
    this.clean.close();
    this.adaptive.close();
  }
}
