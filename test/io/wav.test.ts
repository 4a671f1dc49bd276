import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { TapwardenError } from '../../src/errors.js';
import { parseWavLayout } from '../../src/io/wav/layout.js';
import { WavReader } from '../../src/io/wav/reader.js';
import { WavWriter } from '../../src/io/wav/writer.js';
import { sox, tmpDir } from '../helpers/tools.js';

// Field layout: Microsoft WAVEFORMATEX / WAVEFORMATEXTENSIBLE documentation (docs/REFERENCES.md "WAV").
// Cross-checks: SoX 14.4 (Debian package sox) writes the files, and decodes them to raw float64
// for comparison; it also reads back what tapwarden writes.

const dir = tmpDir();

function readAll(file: string): { rate: number; channels: Float64Array[]; warnings: readonly string[] } {
  const r = WavReader.open(file);
  const channels = Array.from({ length: r.format.channels }, () => new Float64Array(r.frames));
  const idx = channels.map((_, i) => i);
  const chunk = Array.from({ length: channels.length }, () => new Float64Array(1000));
  let at = 0;
  for (;;) {
    const n = r.read(idx, chunk);
    if (n === 0) break;
    chunk.forEach((c, i) => channels[i]!.set(c.subarray(0, n), at));
    at += n;
  }
  r.close();
  return { rate: r.format.sampleRate, channels, warnings: r.warnings };
}

const ENCODINGS: Array<{ name: string; args: string[]; tolerance: number }> = [
  { name: 'PCM 8-bit unsigned', args: ['-b', '8', '-e', 'unsigned-integer'], tolerance: 0 },
  { name: 'PCM 16-bit', args: ['-b', '16', '-e', 'signed-integer'], tolerance: 0 },
  { name: 'PCM 24-bit (EXTENSIBLE)', args: ['-b', '24', '-e', 'signed-integer'], tolerance: 0 },
  { name: 'PCM 32-bit (EXTENSIBLE)', args: ['-b', '32', '-e', 'signed-integer'], tolerance: 0 },
  // SoX passes floats through its 32-bit integer sample, so its decode is exact to 2^-31.
  { name: 'IEEE float 32-bit', args: ['-b', '32', '-e', 'floating-point'], tolerance: 2 ** -30 },
  { name: 'IEEE float 64-bit', args: ['-b', '64', '-e', 'floating-point'], tolerance: 2 ** -30 },
];

describe('WAV files written by SoX read correctly', () => {
  for (const { name, args, tolerance } of ENCODINGS) {
    for (const channels of [1, 2, 5]) {
      it(`${name}, ${channels} channel(s)`, () => {
        const file = join(dir, `sox-${args.join('')}-${channels}.wav`);
        const raw = `${file}.f64`;
        const tones = Array.from({ length: channels }, (_, c) => ['sine', String(200 + 150 * c)]).flat();
        sox('-n', '-r', '11025', '-c', String(channels), ...args, file, 'synth', '0.3', ...tones, 'vol', '0.7');
        sox(file, '-t', 'raw', '-e', 'floating-point', '-b', '64', '-L', raw);
        const b = readFileSync(raw);
        const expected = new Float64Array(b.buffer, b.byteOffset, b.length / 8);
        const got = readAll(file);
        expect(got.rate).toBe(11025);
        expect(got.channels.length).toBe(channels);
        const frames = expected.length / channels;
        expect(got.channels[0]!.length).toBe(frames);
        let worst = 0;
        for (let i = 0; i < frames; i++) {
          for (let c = 0; c < channels; c++) worst = Math.max(worst, Math.abs(got.channels[c]![i]! - expected[i * channels + c]!));
        }
        expect(worst).toBeLessThanOrEqual(tolerance);
        expect(got.warnings).toEqual([]);
        // SoX writes WAVE_FORMAT_EXTENSIBLE for integer PCM wider than 16 bits or beyond stereo.
        if (args[3] === 'signed-integer' && (channels > 2 || args[1] !== '16')) expect(readFileSync(file).readUInt16LE(20)).toBe(0xfffe);
      });
    }
  }

  it('refuses an encoding it does not decode (A-law written by SoX), naming what is allowed', () => {
    const file = join(dir, 'alaw.wav');
    sox('-n', '-r', '8000', '-c', '1', '-e', 'a-law', file, 'synth', '0.1', 'sine', '440');
    expect(() => WavReader.open(file)).toThrow(/unsupported encoding format tag 0x0006 \(A-law\); allowed: PCM 8, 16, 24 or 32-bit, IEEE float/);
  });
});

describe('WAV files tapwarden writes are read back by SoX', () => {
  for (const encoding of ['pcm16', 'pcm24', 'float32'] as const) {
    it(`${encoding}: sox --i reports the format and sox stats the levels`, () => {
      const file = join(dir, `tw-${encoding}.wav`);
      const n = 12_000;
      const a = new Float64Array(n);
      const b = new Float64Array(n);
      for (let i = 0; i < n; i++) {
        a[i] = 0.5 * Math.sin((2 * Math.PI * 1000 * i) / 48000);
        b[i] = 0.25 * Math.sin((2 * Math.PI * 3000 * i) / 48000);
      }
      const w = new WavWriter(file, 48000, 2, encoding);
      w.write([a, b], 7000);
      w.write([a.subarray(7000), b.subarray(7000)], n - 7000);
      w.close();
      const info = sox('--i', file);
      expect(info).toMatch(/Channels\s+: 2/);
      expect(info).toMatch(/Sample Rate\s+: 48000/);
      expect(info).toMatch(new RegExp(`= ${n} samples`));
      expect(info).toMatch(encoding === 'float32' ? /32-bit Floating Point PCM/ : encoding === 'pcm16' ? /16-bit Signed Integer PCM/ : /24-bit Signed Integer PCM/);
      const stats = sox(file, '-n', 'stats');
      const pk = stats.match(/Pk lev dB\s+(\S+)\s+(\S+)\s+(\S+)/)!;
      const rms = stats.match(/RMS lev dB\s+(\S+)\s+(\S+)\s+(\S+)/)!;
      // A sine of amplitude A peaks at 20 log10 A and has RMS 20 log10 (A / sqrt 2).
      expect(Number(pk[2])).toBeCloseTo(20 * Math.log10(0.5), 1);
      expect(Number(pk[3])).toBeCloseTo(20 * Math.log10(0.25), 1);
      expect(Number(rms[2])).toBeCloseTo(20 * Math.log10(0.5 / Math.SQRT2), 1);
      expect(Number(rms[3])).toBeCloseTo(20 * Math.log10(0.25 / Math.SQRT2), 1);
    });
  }
});

// Literal headers for the cases a recorder produces when it is killed or written carelessly.
function chunk(id: string, body: Buffer, pad = true): Buffer {
  const h = Buffer.alloc(8);
  h.write(id, 0, 'latin1');
  h.writeUInt32LE(body.length, 4);
  return Buffer.concat([h, body, pad && body.length % 2 ? Buffer.alloc(1) : Buffer.alloc(0)]);
}

function u32(v: number): Buffer {
  const b = Buffer.alloc(4);
  b.writeUInt32LE(v, 0);
  return b;
}

function fmt16(channels: number, rate: number, bits: number, tag = 1): Buffer {
  const b = Buffer.alloc(16);
  b.writeUInt16LE(tag, 0);
  b.writeUInt16LE(channels, 2);
  b.writeUInt32LE(rate, 4);
  b.writeUInt32LE((rate * channels * bits) / 8, 8);
  b.writeUInt16LE((channels * bits) / 8, 12);
  b.writeUInt16LE(bits, 14);
  return b;
}

function riff(chunks: Buffer[], sizeField?: number): Buffer {
  const body = Buffer.concat([Buffer.from('WAVE', 'latin1'), ...chunks]);
  const h = Buffer.alloc(8);
  h.write('RIFF', 0, 'latin1');
  h.writeUInt32LE(sizeField ?? body.length, 4);
  return Buffer.concat([h, body]);
}

function samples16(values: number[]): Buffer {
  const b = Buffer.alloc(values.length * 2);
  values.forEach((v, i) => b.writeInt16LE(v, i * 2));
  return b;
}

function layoutOf(buf: Buffer) {
  return parseWavLayout(buf.length, (o, l) => buf.subarray(o, Math.min(buf.length, o + l)), 'x.wav');
}

describe('WAV headers as the format allows', () => {
  const data = samples16([1, 2, 3, 4, 5, 6]);

  it('skips an odd-sized unknown chunk and its pad byte, with a warning', () => {
    const l = layoutOf(riff([chunk('fmt ', fmt16(2, 8000, 16)), chunk('zzzz', Buffer.from([1, 2, 3])), chunk('data', data)]));
    expect(l.frames).toBe(3);
    expect(l.warnings).toEqual(['skipped unknown chunk "zzzz" (3 bytes)']);
  });

  it('copes with an odd chunk whose writer forgot the pad byte', () => {
    const l = layoutOf(riff([chunk('fmt ', fmt16(1, 8000, 16)), chunk('LIST', Buffer.from([1, 2, 3]), false), chunk('data', data)]));
    expect(l.frames).toBe(6);
    expect(l.warnings).toEqual(['chunk "LIST" has an odd size and no pad byte']);
  });

  it('reads to the end of the file when the data size is zero (a recorder killed mid-trial)', () => {
    const buf = riff([chunk('fmt ', fmt16(1, 8000, 16)), chunk('data', data)], 0);
    buf.writeUInt32LE(0, buf.length - data.length - 4);
    const l = layoutOf(buf);
    expect(l.frames).toBe(6);
    expect(l.warnings.join('\n')).toMatch(/data chunk size field says 0 bytes but 12 follow it; reading to the end/);
  });

  it('reads what is there when the data size claims more than the file holds, dropping a partial frame', () => {
    const buf = Buffer.concat([riff([chunk('fmt ', fmt16(2, 8000, 16)), chunk('data', data)]), Buffer.from([9, 9])]);
    buf.writeUInt32LE(1_000_000, buf.length - data.length - 6);
    const l = layoutOf(buf);
    expect(l.frames).toBe(3);
    expect(l.warnings.some((w) => w.includes('do not make a whole frame'))).toBe(true);
  });

  it('reads WAVE_FORMAT_EXTENSIBLE and RF64 headers', () => {
    const ext = Buffer.alloc(40);
    fmt16(1, 8000, 16, 0xfffe).copy(ext);
    ext.writeUInt16LE(22, 16);
    ext.writeUInt16LE(16, 18);
    Buffer.from('0100000000001000800000aa00389b71', 'hex').copy(ext, 24);
    expect(layoutOf(riff([chunk('fmt ', ext), chunk('data', data)])).format.encoding).toBe('pcm');
    const ds64 = Buffer.alloc(28);
    ds64.writeBigUInt64LE(BigInt(data.length), 8);
    const rf = riff([chunk('ds64', ds64), chunk('fmt ', fmt16(1, 8000, 16)), chunk('data', data)]);
    rf.write('RF64', 0, 'latin1');
    rf.writeUInt32LE(0xffffffff, rf.length - data.length - 4);
    const l = layoutOf(rf);
    expect(l.frames).toBe(6);
    expect(l.warnings).toEqual([]);
  });

  it('names what is wrong with a file it cannot read', () => {
    const code = (buf: Buffer) => {
      try {
        layoutOf(buf);
      } catch (err) {
        return `${(err as TapwardenError).code}: ${(err as Error).message}`;
      }
      return 'no error';
    };
    expect(code(Buffer.from('ID3\u0004 an mp3 file, say', 'latin1'))).toMatch(/^TW_ERR_WAV_NOT_RIFF: x.wav is not a WAV file: it starts with "ID3/);
    expect(code(Buffer.from('RIFF'))).toMatch(/^TW_ERR_WAV_TRUNCATED/);
    expect(code(riff([chunk('fmt ', fmt16(1, 8000, 16))]))).toMatch(/^TW_ERR_WAV_TRUNCATED: x.wav is truncated: no data chunk/);
    expect(code(riff([chunk('fmt ', fmt16(1, 8000, 12)), chunk('data', data)]))).toMatch(/^TW_ERR_WAV_ENCODING: .*with 12 bits per sample/);
    expect(code(riff([chunk('fmt ', fmt16(1, 0, 16)), chunk('data', data)]))).toMatch(/^TW_ERR_WAV_RATE/);
  });
});

describe('streaming', () => {
  it('decodes a file in fixed-size reads, whatever its length', () => {
    const file = join(dir, 'long.wav');
    const n = 100_000;
    const w = new WavWriter(file, 8000, 1, 'pcm16');
    const x = new Float64Array(n).map((_, i) => ((i % 200) - 100) / 128);
    w.write([x], n);
    w.close();
    const r = WavReader.open(file);
    const out = new Float64Array(300_000);
    expect(r.read([0], [out])).toBe(n);
    expect(r.reads).toBe(Math.ceil((2 * n) / 2 ** 20)); // 1 MiB reads: memory does not grow with the file
    expect(out.subarray(0, n)).toEqual(x);
    r.close();
  });

  it('caps its buffer whatever the header declares: 65,535 float64 channels in a 172-byte file', () => {
    const fmt = Buffer.alloc(16);
    fmt.writeUInt16LE(3, 0);
    fmt.writeUInt16LE(65535, 2);
    fmt.writeUInt32LE(8000, 4);
    fmt.writeUInt32LE(8000 * 65535 * 8, 8);
    fmt.writeUInt16LE(65535 * 8 > 0xffff ? 0xffff : 65535 * 8, 12);
    fmt.writeUInt16LE(64, 14);
    const file = join(dir, 'wide.wav');
    const body = Buffer.concat([Buffer.from('WAVE'), chunk('fmt ', fmt), chunk('data', Buffer.alloc(172 - 12 - 24 - 8))]);
    const bytes = Buffer.concat([Buffer.from('RIFF'), u32(body.length), body]);
    writeFileSync(file, bytes);
    const before = process.memoryUsage().arrayBuffers;
    const r = WavReader.open(file);
    const grew = process.memoryUsage().arrayBuffers - before;
    expect(r.frames).toBe(0);
    expect(grew).toBeLessThan(2 * 1024 * 1024); // one frame (512 KiB) fits the 1 MiB buffer; not 4.3 GB
    r.close();
  });

  it('a damaged fmt size does not read the file into memory', () => {
    const file = join(dir, 'bigfmt.wav');
    const fmt = fmt16(2, 8000, 16);
    const data = Buffer.alloc(8 * 1024 * 1024);
    const body = Buffer.concat([Buffer.from('WAVE'), Buffer.from('fmt '), u32(0xfffffff0), fmt, chunk('data', data)]);
    writeFileSync(file, Buffer.concat([Buffer.from('RIFF'), u32(body.length), body]));
    const before = process.memoryUsage().arrayBuffers;
    let threw: unknown = null;
    try {
      WavReader.open(file).close();
    } catch (err) {
      threw = err;
    }
    expect(process.memoryUsage().arrayBuffers - before).toBeLessThan(4 * 1024 * 1024);
    // The fmt chunk's claimed size swallows the data chunk: a clear error, not an 8 MB read.
    expect(threw).toBeInstanceOf(TapwardenError);
    expect((threw as TapwardenError).code).toBe('TW_ERR_WAV_TRUNCATED');
  });
});

describe('RF64 past 4 GiB (EBU Tech 3306)', () => {
  it('a file past the RIFF size limit is closed as RF64 with a ds64 chunk, and SoX and tapwarden read it back', () => {
    // The limit is lowered so the test writes kilobytes, not 4 GiB; the layout is the same.
    const file = join(dir, 'rf64.wav');
    const n = 5000;
    const x = Float64Array.from({ length: n }, (_, i) => Math.round(16000 * Math.sin(i * 0.01)) / 32768);
    const w = new WavWriter(file, 8000, 2, 'pcm16', { rf64AboveBytes: 4000 });
    w.write([x, x.map((v) => -v)], n);
    w.close();
    const b = readFileSync(file);
    expect(b.toString('latin1', 0, 4)).toBe('RF64');
    expect(b.readUInt32LE(4)).toBe(0xffffffff);
    expect(b.toString('latin1', 12, 16)).toBe('ds64');
    expect(Number(b.readBigUInt64LE(12 + 8 + 8))).toBe(n * 4); // ds64: data size
    expect(Number(b.readBigUInt64LE(12 + 8 + 16))).toBe(n); // ds64: sample count
    expect(sox('--i', file)).toMatch(/= 5000 samples/);
    const back = readAll(file);
    expect(back.channels[0]).toEqual(x);
    expect(back.warnings).toEqual([]);
    // Under the limit the same writer leaves a plain RIFF with a JUNK chunk where ds64 would go.
    const small = join(dir, 'riff.wav');
    const v = new WavWriter(small, 8000, 2, 'pcm16');
    v.write([x, x], n);
    v.close();
    const c = readFileSync(small);
    expect(c.toString('latin1', 0, 4)).toBe('RIFF');
    expect(c.toString('latin1', 12, 16)).toBe('JUNK');
  });
});
