import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { TapwardenError, oneLine } from '../../errors.js';
import { parseWavLayout, type WavFormat, type WavLayout } from './layout.js';

/** Frames decoded per read; the reader's memory does not grow with the file. */
const READ_FRAMES = 8192;

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
  private framePos = 0;

  private constructor(fd: number, layout: WavLayout) {
    this.fd = fd;
    this.layout = layout;
    this.format = layout.format;
    this.frames = layout.frames;
    this.warnings = layout.warnings;
    this.buf = Buffer.alloc(READ_FRAMES * layout.format.blockAlign);
    this.view = new DataView(this.buf.buffer, this.buf.byteOffset, this.buf.byteLength);
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

  /**
   * Decodes up to out[0].length frames into out[c] for each wanted channel index c of `channels`
   * (out[i] receives channel channels[i]). Returns the frames decoded; 0 at the end.
   */
  read(channels: readonly number[], out: readonly Float64Array[]): number {
    const { blockAlign } = this.format;
    const want = Math.min(out[0]!.length, this.remaining);
    let done = 0;
    while (done < want) {
      const n = Math.min(want - done, READ_FRAMES);
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
    const { encoding, bitsPerSample, blockAlign } = this.format;
    const v = this.view;
    const width = bitsPerSample / 8;
    let p = channel * width;
    if (encoding === 'float') {
      if (bitsPerSample === 32) for (let i = 0; i < frames; i++, p += blockAlign) out[at + i] = v.getFloat32(p, true);
      else for (let i = 0; i < frames; i++, p += blockAlign) out[at + i] = v.getFloat64(p, true);
      return;
    }
    switch (bitsPerSample) {
      case 8:
        for (let i = 0; i < frames; i++, p += blockAlign) out[at + i] = (v.getUint8(p) - 128) / 128;
        break;
      case 16:
        for (let i = 0; i < frames; i++, p += blockAlign) out[at + i] = v.getInt16(p, true) / 32768;
        break;
      case 24:
        for (let i = 0; i < frames; i++, p += blockAlign) {
          out[at + i] = ((v.getInt8(p + 2) << 16) | (v.getUint8(p + 1) << 8) | v.getUint8(p)) / 8388608;
        }
        break;
      default:
        for (let i = 0; i < frames; i++, p += blockAlign) out[at + i] = v.getInt32(p, true) / 2147483648;
    }
  }

  close(): void {
    closeSync(this.fd);
  }
}
