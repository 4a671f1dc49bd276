import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { TapwardenError, oneLine } from '../../errors.js';
import { parseWavLayout, type WavFormat, type WavLayout } from './layout.js';

/**
 * Bytes read at a time: the reader's buffer is this size whatever the header declares (65,535
 * channels of float64 take 512 KiB a frame, so one frame always fits), and its memory does not
 * grow with the file.
 */
const READ_BYTES = 1 << 20;

/**
 * Streams a WAV file's frames as full-scale-normalized doubles, channel by channel.
 * PCM integers are divided by 2^(bits-1) (8-bit is offset binary); float samples pass as they
 * are, non-finite values included: the engine counts and replaces those.
 */
export class WavReader {
  readonly format: WavFormat;
  readonly frames: number;
  readonly warnings: readonly string[];
  /** Calls to the operating system's read, for tests that count decodes. */
  reads = 0;
  private readonly fd: number;
  private readonly layout: WavLayout;
  private readonly buf: Buffer;
  private readonly view: DataView;
  private readonly readFrames: number;
  private readonly i16: Int16Array;
  private readonly i32: Int32Array;
  private readonly f32: Float32Array;
  private readonly f64: Float64Array;
  private framePos = 0;

  private constructor(fd: number, layout: WavLayout) {
    this.fd = fd;
    this.layout = layout;
    this.format = layout.format;
    this.frames = layout.frames;
    this.warnings = layout.warnings;
    const align = layout.format.blockAlign;
    this.readFrames = Math.max(1, Math.floor(READ_BYTES / align));
    // Its own ArrayBuffer at offset 0 (Buffer.alloc never pools), so typed views are aligned.
    this.buf = Buffer.alloc(this.readFrames * align);
    this.view = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
    const ab = this.buf.buffer;
    const fit = (w: number) => Math.floor(this.buf.byteLength / w);
    this.i16 = new Int16Array(ab, 0, fit(2));
    this.i32 = new Int32Array(ab, 0, fit(4));
    this.f32 = new Float32Array(ab, 0, fit(4));
    this.f64 = new Float64Array(ab, 0, fit(8));
  }

  static open(file: string): WavReader {
    let fd: number;
    try {
      fd = openSync(file, 'r');
    } catch (err) {
      throw new TapwardenError('TW_ERR_INPUT_OPEN', { file, reason: oneLine(err) });
    }
    try {
      const size = fstatSync(fd).size;
      const readAt = (offset: number, length: number): Buffer => {
        const b = Buffer.alloc(Math.max(0, Math.min(length, size - offset)));
        if (b.length > 0) readSync(fd, b, 0, b.length, offset);
        return b;
      };
      return new WavReader(fd, parseWavLayout(size, readAt, file));
    } catch (err) {
      closeSync(fd);
      throw err;
    }
  }

  /** Frames not yet read. */
  get remaining(): number {
    return this.frames - this.framePos;
  }

  /** The next frame read() decodes. */
  get position(): number {
    return this.framePos;
  }

  /** Moves to frame `frame` (clamped to 0..frames). */
  seek(frame: number): void {
    this.framePos = Math.max(0, Math.min(this.frames, Math.floor(frame)));
  }

  /**
   * Decodes up to out[0].length frames into out[c] for each wanted channel index c of `channels`
   * (out[i] receives channel channels[i]). Returns the frames decoded; 0 at the end.
   */
  read(channels: readonly number[], out: readonly Float64Array[]): number {
    const { blockAlign } = this.format;
    const want = Math.min(out[0]!.length, this.remaining);
    let done = 0;
    while (done < want) {
      const n = Math.min(want - done, this.readFrames);
      const bytes = n * blockAlign;
      let got = 0;
      while (got < bytes) {
        const r = readSync(this.fd, this.buf, got, bytes - got, this.layout.dataOffset + (this.framePos + done) * blockAlign + got);
        this.reads++;
        if (r === 0) break;
        got += r;
      }
      const frames = Math.floor(got / blockAlign);
      for (let i = 0; i < channels.length; i++) this.decode(channels[i]!, out[i]!, done, frames);
      done += frames;
      if (frames < n) break; // the file shrank under us
    }
    this.framePos += done;
    return done;
  }

  private decode(channel: number, out: Float64Array, at: number, frames: number): void {
    const { encoding, bitsPerSample, blockAlign, channels } = this.format;
    const width = bitsPerSample / 8;
    if (encoding === 'float') {
      const a = bitsPerSample === 32 ? this.f32 : this.f64;
      for (let i = 0, p = channel; i < frames; i++, p += channels) out[at + i] = a[p]!;
      return;
    }
    if (bitsPerSample === 16) {
      const a = this.i16;
      for (let i = 0, p = channel; i < frames; i++, p += channels) out[at + i] = a[p]! / 32768;
      return;
    }
    if (bitsPerSample === 32) {
      const a = this.i32;
      for (let i = 0, p = channel; i < frames; i++, p += channels) out[at + i] = a[p]! / 2147483648;
      return;
    }
    const v = this.view;
    let p = channel * width;
    if (bitsPerSample === 8) {
      for (let i = 0; i < frames; i++, p += blockAlign) out[at + i] = (v.getUint8(p) - 128) / 128;
      return;
    }
    for (let i = 0; i < frames; i++, p += blockAlign) {
      out[at + i] = ((v.getInt8(p + 2) << 16) | (v.getUint8(p + 1) << 8) | v.getUint8(p)) / 8388608;
    }
  }

  close(): void {
    closeSync(this.fd);
  }
}
