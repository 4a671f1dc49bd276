import { closeSync, openSync, writeSync } from 'node:fs';
import type { OutputEncoding } from '../../config/schema.js';
import { TapwardenError, oneLine } from '../../errors.js';

const HEADER_BYTES = 58;

/**
 * Writes a WAV file as frames arrive: a header with placeholder sizes, the samples, then the
 * sizes patched on close. PCM samples are rounded to nearest and clipped (counted in `clipped`);
 * non-finite values are written as 0 (counted in `nonFinite`). Float files carry a fact chunk,
 * as the format requires for non-PCM data.
 */
export class WavWriter {
  clipped = 0;
  nonFinite = 0;
  private readonly fd: number;
  private readonly bytesPerSample: number;
  private buf: Buffer = Buffer.alloc(0);
  private dataBytes = 0;
  private framesWritten = 0;

  constructor(
    readonly file: string,
    readonly sampleRate: number,
    readonly channels: number,
    readonly encoding: OutputEncoding,
  ) {
    this.bytesPerSample = encoding === 'pcm16' ? 2 : encoding === 'pcm24' ? 3 : 4;
    try {
      this.fd = openSync(file, 'w');
      writeSync(this.fd, this.header());
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file, reason: oneLine(err) });
    }
  }

  /** The fixed 58-byte header: RIFF, fmt (18 bytes), fact, data. */
  private header(): Buffer {
    const h = Buffer.alloc(HEADER_BYTES);
    const float = this.encoding === 'float32';
    const align = this.channels * this.bytesPerSample;
    h.write('RIFF', 0, 'latin1');
    h.writeUInt32LE(HEADER_BYTES - 8 + this.dataBytes + (this.dataBytes % 2), 4);
    h.write('WAVE', 8, 'latin1');
    h.write('fmt ', 12, 'latin1');
    h.writeUInt32LE(18, 16);
    h.writeUInt16LE(float ? 3 : 1, 20);
    h.writeUInt16LE(this.channels, 22);
    h.writeUInt32LE(this.sampleRate, 24);
    h.writeUInt32LE(this.sampleRate * align, 28);
    h.writeUInt16LE(align, 32);
    h.writeUInt16LE(this.bytesPerSample * 8, 34);
    h.writeUInt16LE(0, 36);
    h.write('fact', 38, 'latin1');
    h.writeUInt32LE(4, 42);
    h.writeUInt32LE(this.framesWritten, 46);
    h.write('data', 50, 'latin1');
    h.writeUInt32LE(this.dataBytes, 54);
    return h;
  }

  /** Appends `frames` frames; chans[c][i] is channel c of frame i. */
  write(chans: readonly Float64Array[], frames: number): void {
    const bps = this.bytesPerSample;
    const need = frames * this.channels * bps;
    if (this.buf.length < need) this.buf = Buffer.alloc(need);
    const b = this.buf;
    let p = 0;
    for (let i = 0; i < frames; i++) {
      for (let c = 0; c < this.channels; c++) {
        let v = chans[c]![i]!;
        if (!Number.isFinite(v)) {
          this.nonFinite++;
          v = 0;
        }
        if (this.encoding === 'float32') {
          b.writeFloatLE(v, p);
        } else {
          const full = bps === 2 ? 32768 : 8388608;
          let s = Math.round(v * full);
          if (s >= full || s < -full) {
            this.clipped++;
            s = s < 0 ? -full : full - 1;
          }
          if (bps === 2) b.writeInt16LE(s, p);
          else b.writeIntLE(s, p, 3);
        }
        p += bps;
      }
    }
    if (this.dataBytes + need > 0xffffffff - HEADER_BYTES) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: this.file, reason: 'a WAV file cannot exceed 4 GiB' });
    }
    try {
      writeSync(this.fd, b, 0, need);
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: this.file, reason: oneLine(err) });
    }
    this.dataBytes += need;
    this.framesWritten += frames;
  }

  /** Pads, patches the sizes and closes. */
  close(): void {
    try {
      if (this.dataBytes % 2 === 1) writeSync(this.fd, Buffer.alloc(1));
      writeSync(this.fd, this.header(), 0, HEADER_BYTES, 0);
      closeSync(this.fd);
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: this.file, reason: oneLine(err) });
    }
  }
}
