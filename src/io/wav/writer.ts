import { closeSync, openSync, writeSync } from 'node:fs';
import { endianness } from 'node:os';
import type { OutputEncoding } from '../../config/schema.js';
import { TapwardenError, oneLine } from '../../errors.js';

/** RIFF header, JUNK (room for ds64), fmt (18 bytes), fact, data header. */
const HEADER_BYTES = 12 + 36 + 26 + 12 + 8;
const JUNK_AT = 12;
const FMT_AT = JUNK_AT + 36;
const FACT_AT = FMT_AT + 26;
const DATA_AT = FACT_AT + 12;
/** A RIFF size field holds at most this; a larger file becomes RF64 (EBU Tech 3306). */
const RIFF_MAX = 0xffffffff;
const LITTLE_ENDIAN = endianness() === 'LE';
/** Encoded samples are written out this many bytes at a time (or a larger block at once). */
const STAGE_BYTES = 1 << 20;

export interface WavWriterOptions {
  /** Write RF64 once the RIFF size would pass this many bytes (default: the 32-bit limit; lower in tests). */
  readonly rf64AboveBytes?: number;
}

/**
 * Writes a WAV file as frames arrive: a header with placeholder sizes, the samples, then the
 * sizes patched on close. A file that outgrows the 32-bit RIFF size fields is closed as RF64
 * (EBU Tech 3306): "RF64" for "RIFF", the reserved JUNK chunk turned into "ds64" with the 64-bit
 * sizes, 0xFFFFFFFF in the 32-bit fields. PCM samples are rounded to nearest and clipped
 * (counted in `clipped`); non-finite values are written as 0 (counted in `nonFinite`). Float
 * files carry a fact chunk, as the format requires for non-PCM data. `float64` (captured
 * episodes) stores every value exactly as given, non-finite ones included.
 */

export type WavEncoding = OutputEncoding | 'float64';
export class WavWriter {
  clipped = 0;
  nonFinite = 0;
  private readonly fd: number;
  private readonly bytesPerSample: number;
  private readonly rf64Above: number;
  /** The encode buffer and its views, made again only when a larger block arrives. */
  private bytes = new Uint8Array(0);
  private f32 = new Float32Array(0);
  private s16 = new Int16Array(0);
  private view = new DataView(this.bytes.buffer);
  private dataBytes = 0;
  /** Encoded bytes waiting in `bytes` to be written. */
  private staged = 0;
  private framesWritten = 0;

  constructor(
    readonly file: string,
    readonly sampleRate: number,
    readonly channels: number,
    readonly encoding: WavEncoding,
    opts: WavWriterOptions = {},
  ) {
    this.bytesPerSample = encoding === 'pcm16' ? 2 : encoding === 'pcm24' ? 3 : encoding === 'float64' ? 8 : 4;
    this.rf64Above = opts.rf64AboveBytes ?? RIFF_MAX;
    try {
      this.fd = openSync(file, 'w');
      writeSync(this.fd, this.header());
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file, reason: oneLine(err) });
    }
  }

  /** Whether the file, as written so far, needs RF64. */
  get isRf64(): boolean {
    return HEADER_BYTES - 8 + this.dataBytes + (this.dataBytes % 2) > this.rf64Above;
  }

  private header(): Buffer {
    const h = Buffer.alloc(HEADER_BYTES);
    const float = this.encoding === 'float32' || this.encoding === 'float64';
    const align = this.channels * this.bytesPerSample;
    const riffSize = HEADER_BYTES - 8 + this.dataBytes + (this.dataBytes % 2);
    const rf64 = this.isRf64;
    h.write(rf64 ? 'RF64' : 'RIFF', 0, 'latin1');
    h.writeUInt32LE(rf64 ? RIFF_MAX : riffSize, 4);
    h.write('WAVE', 8, 'latin1');
    h.write(rf64 ? 'ds64' : 'JUNK', JUNK_AT, 'latin1');
    h.writeUInt32LE(28, JUNK_AT + 4);
    if (rf64) {
      h.writeBigUInt64LE(BigInt(riffSize), JUNK_AT + 8);
      h.writeBigUInt64LE(BigInt(this.dataBytes), JUNK_AT + 16);
      h.writeBigUInt64LE(BigInt(this.framesWritten), JUNK_AT + 24);
      h.writeUInt32LE(0, JUNK_AT + 32); // no table entries
    }
    h.write('fmt ', FMT_AT, 'latin1');
    h.writeUInt32LE(18, FMT_AT + 4);
    h.writeUInt16LE(float ? 3 : 1, FMT_AT + 8);
    h.writeUInt16LE(this.channels, FMT_AT + 10);
    h.writeUInt32LE(this.sampleRate, FMT_AT + 12);
    h.writeUInt32LE(this.sampleRate * align, FMT_AT + 16);
    h.writeUInt16LE(align, FMT_AT + 20);
    h.writeUInt16LE(this.bytesPerSample * 8, FMT_AT + 22);
    h.writeUInt16LE(0, FMT_AT + 24);
    h.write('fact', FACT_AT, 'latin1');
    h.writeUInt32LE(4, FACT_AT + 4);
    h.writeUInt32LE(rf64 ? RIFF_MAX : this.framesWritten, FACT_AT + 8);
    h.write('data', DATA_AT, 'latin1');
    h.writeUInt32LE(rf64 ? RIFF_MAX : this.dataBytes, DATA_AT + 4);
    return h;
  }

  /** A sample as it will be stored: finite (non-finite counted and written as 0). */
  private finite(v: number): number {
    if (v - v === 0) return v; // false for NaN and +-Infinity
    this.nonFinite++;
    return 0;
  }

  /**
   * Appends `frames` frames; chans[c][i] is channel c of frame i. The encoded frames are staged
   * and written STAGE_BYTES at a time (a write per block would be a system call per block).
   */
  write(chans: readonly Float64Array[], frames: number): void {
    const ch = this.channels;
    const bps = this.bytesPerSample;
    const need = frames * ch * bps;
    if (this.staged + need > this.bytes.length) {
      this.flush();
      if (this.bytes.length < need) this.grow(need);
    }
    // Staged bytes are whole frames, so the offset is a multiple of every sample size.
    const at = this.staged;
    if (this.encoding === 'float64') {
      const v = this.view;
      for (let c = 0; c < ch; c++) {
        const src = chans[c]!;
        for (let i = 0, p = at + c * 8; i < frames; i++, p += ch * 8) v.setFloat64(p, src[i]!, true);
      }
    } else if (this.encoding === 'float32' && LITTLE_ENDIAN) {
      const f = this.f32;
      for (let c = 0; c < ch; c++) {
        const src = chans[c]!;
        for (let i = 0, p = at / 4 + c; i < frames; i++, p += ch) f[p] = this.finite(src[i]!);
      }
    } else if (this.encoding === 'pcm16' && LITTLE_ENDIAN) {
      const s16 = this.s16;
      for (let c = 0; c < ch; c++) {
        const src = chans[c]!;
        for (let i = 0, p = at / 2 + c; i < frames; i++, p += ch) s16[p] = this.pcm(src[i]!, 32768);
      }
    } else {
      const v = this.view;
      for (let c = 0; c < ch; c++) {
        const src = chans[c]!;
        for (let i = 0, p = at + c * bps; i < frames; i++, p += ch * bps) {
          if (this.encoding === 'float32') v.setFloat32(p, this.finite(src[i]!), true);
          else if (bps === 2) v.setInt16(p, this.pcm(src[i]!, 32768), true);
          else {
            const s = this.pcm(src[i]!, 8388608);
            v.setUint8(p, s & 0xff);
            v.setUint8(p + 1, (s >> 8) & 0xff);
            v.setUint8(p + 2, (s >> 16) & 0xff);
          }
        }
      }
    }
    this.staged += need;
    this.dataBytes += need;
    this.framesWritten += frames;
  }

  /** Writes the staged frames out. */
  private flush(): void {
    if (this.staged === 0) return;
    try {
      writeSync(this.fd, this.bytes, 0, this.staged);
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: this.file, reason: oneLine(err) });
    }
    this.staged = 0;
  }

  private grow(need: number): void {
    // A multiple of 24 bytes, so that the 2-, 4- and 8-byte views cover it exactly.
    const size = Math.ceil(Math.max(need, STAGE_BYTES, 2 * this.bytes.length) / 24) * 24;
    const buf = new ArrayBuffer(size);
    this.bytes = new Uint8Array(buf);
    this.f32 = new Float32Array(buf);
    this.s16 = new Int16Array(buf);
    this.view = new DataView(buf);
  }

  /** A sample as a PCM integer of full scale `full`: rounded, clipped (counted). */
  private pcm(value: number, full: number): number {
    let s = Math.round(this.finite(value) * full);
    if (s >= full || s < -full) {
      this.clipped++;
      s = s < 0 ? -full : full - 1;
    }
    return s;
  }

  /** Pads, patches the sizes (RF64 when they do not fit 32 bits) and closes. */
  close(): void {
    this.flush();
    try {
      if (this.dataBytes % 2 === 1) writeSync(this.fd, Buffer.alloc(1));
      writeSync(this.fd, this.header(), 0, HEADER_BYTES, 0);
      closeSync(this.fd);
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: this.file, reason: oneLine(err) });
    }
  }
}
