import { TapwardenError } from '../../errors.js';

/**
 * Parsing of a WAV (RIFF/WAVE, and RF64) header into a layout: where the samples are and how
 * they are encoded. Pure: it reads through `readAt`, so it is tested on literal bytes.
 * Field layout from Microsoft's WAVEFORMATEX / WAVEFORMATEXTENSIBLE documentation.
 */

export type SampleEncoding = 'pcm' | 'float';

export interface WavFormat {
  readonly sampleRate: number;
  readonly channels: number;
  readonly encoding: SampleEncoding;
  /** Container bits per sample (8, 16, 24, 32, 64). */
  readonly bitsPerSample: number;
  /** Bytes per frame (all channels). */
  readonly blockAlign: number;
}

export interface WavLayout {
  readonly format: WavFormat;
  readonly dataOffset: number;
  readonly dataBytes: number;
  readonly frames: number;
  readonly warnings: readonly string[];
}

const WAVE_FORMAT_PCM = 0x0001;
const WAVE_FORMAT_IEEE_FLOAT = 0x0003;
const WAVE_FORMAT_EXTENSIBLE = 0xfffe;
/** Bytes 2..15 of every KSDATAFORMAT_SUBTYPE_* GUID: xxxxxxxx-0000-0010-8000-00AA00389B71. */
const GUID_TAIL = Buffer.from([0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xaa, 0x00, 0x38, 0x9b, 0x71]);

const KNOWN_TAGS: Record<number, string> = {
  0x0002: 'Microsoft ADPCM',
  0x0006: 'A-law',
  0x0007: 'mu-law',
  0x0011: 'IMA ADPCM',
  0x0055: 'MPEG layer 3',
};

/** Chunks that carry metadata only; skipped without a warning. */
const QUIET_CHUNKS = new Set(['LIST', 'JUNK', 'junk', 'PAD ', 'fact', 'bext', 'cue ', 'id3 ', 'ID3 ', 'smpl', 'inst', 'iXML', 'acid', 'PEAK', 'FLLR', 'regn', 'umid', 'cart']);

/** The longest fmt chunk body that carries fields tapwarden reads. */
const FMT_MAX_BYTES = 64;

export type ReadAt = (offset: number, length: number) => Buffer;

function isChunkId(b: Buffer): boolean {
  if (b.length < 4) return false;
  for (let i = 0; i < 4; i++) if (b[i]! < 0x20 || b[i]! > 0x7e) return false;
  return true;
}

function describeTag(tag: number): string {
  return `format tag 0x${tag.toString(16).padStart(4, '0')}${KNOWN_TAGS[tag] ? ` (${KNOWN_TAGS[tag]})` : ''}`;
}

function parseFmt(b: Buffer, file: string): WavFormat & { declaredAlign: number } {
  if (b.length < 16) throw new TapwardenError('TW_ERR_WAV_TRUNCATED', { file, reason: `fmt chunk holds ${b.length} bytes, needs 16` });
  let tag = b.readUInt16LE(0);
  const channels = b.readUInt16LE(2);
  const sampleRate = b.readUInt32LE(4);
  const declaredAlign = b.readUInt16LE(12);
  const bitsPerSample = b.readUInt16LE(14);
  if (tag === WAVE_FORMAT_EXTENSIBLE) {
    const cbSize = b.length >= 18 ? b.readUInt16LE(16) : 0;
    if (cbSize < 22 || b.length < 40) {
      throw new TapwardenError('TW_ERR_WAV_ENCODING', { file, encoding: 'WAVE_FORMAT_EXTENSIBLE with a short extension (cbSize < 22)' });
    }
    const sub = b.subarray(24, 40);
    if (!sub.subarray(2).equals(GUID_TAIL)) {
      throw new TapwardenError('TW_ERR_WAV_ENCODING', { file, encoding: `WAVE_FORMAT_EXTENSIBLE with a non-standard sub-format GUID` });
    }
    tag = sub.readUInt16LE(0);
  }
  let encoding: SampleEncoding;
  if (tag === WAVE_FORMAT_PCM && [8, 16, 24, 32].includes(bitsPerSample)) encoding = 'pcm';
  else if (tag === WAVE_FORMAT_IEEE_FLOAT && (bitsPerSample === 32 || bitsPerSample === 64)) encoding = 'float';
  else {
    const what = tag === WAVE_FORMAT_PCM || tag === WAVE_FORMAT_IEEE_FLOAT ? `${describeTag(tag)} with ${bitsPerSample} bits per sample` : describeTag(tag);
    throw new TapwardenError('TW_ERR_WAV_ENCODING', { file, encoding: what });
  }
  if (channels === 0) throw new TapwardenError('TW_ERR_WAV_ENCODING', { file, encoding: '0 channels' });
  if (sampleRate < 1 || sampleRate > 1_000_000) throw new TapwardenError('TW_ERR_WAV_RATE', { file, rate: sampleRate });
  return { sampleRate, channels, encoding, bitsPerSample, blockAlign: (channels * bitsPerSample) / 8, declaredAlign };
}

/** Reads the header; throws TapwardenError for what cannot be read, warns for what can. */
export function parseWavLayout(fileSize: number, readAt: ReadAt, file: string): WavLayout {
  const warnings: string[] = [];
  if (fileSize < 12) {
    if (fileSize >= 4 && readAt(0, 4).toString('latin1') === 'RIFF') {
      throw new TapwardenError('TW_ERR_WAV_TRUNCATED', { file, reason: `only ${fileSize} bytes, the RIFF header alone needs 12` });
    }
    throw new TapwardenError('TW_ERR_WAV_NOT_RIFF', { file, reason: `only ${fileSize} bytes, no RIFF header` });
  }
  const head = readAt(0, 12);
  const riff = head.toString('latin1', 0, 4);
  if (riff !== 'RIFF' && riff !== 'RF64') {
    throw new TapwardenError('TW_ERR_WAV_NOT_RIFF', { file, reason: `it starts with ${JSON.stringify(head.toString('latin1', 0, 4))}, not "RIFF"` });
  }
  const form = head.toString('latin1', 8, 12);
  if (form !== 'WAVE') throw new TapwardenError('TW_ERR_WAV_NOT_RIFF', { file, reason: `RIFF form type is ${JSON.stringify(form)}, not "WAVE"` });
  const riffEnd = 8 + head.readUInt32LE(4);
  if (riff === 'RIFF' && riffEnd !== fileSize && riffEnd !== fileSize - 1) {
    warnings.push(`RIFF size field says ${riffEnd} bytes but the file has ${fileSize}`);
  }

  let ds64DataBytes: number | null = null;
  let fmt: (WavFormat & { declaredAlign: number }) | null = null;
  let data: { offset: number; declared: number } | null = null;
  let pos = 12;
  while (pos + 8 <= fileSize && (fmt === null || data === null)) {
    const hdr = readAt(pos, 8);
    const id = hdr.toString('latin1', 0, 4);
    const size = hdr.readUInt32LE(4);
    const body = pos + 8;
    if (id === 'fmt ') {
      // The fields end at byte 40 (EXTENSIBLE); a damaged size must not read the file into memory.
      fmt = parseFmt(readAt(body, Math.min(size, FMT_MAX_BYTES, fileSize - body)), file);
    } else if (id === 'ds64' && riff === 'RF64') {
      const b = readAt(body, Math.min(size, 28));
      if (b.length >= 16) ds64DataBytes = Number(b.readBigUInt64LE(8));
    } else if (id === 'data') {
      data = { offset: body, declared: size === 0xffffffff && ds64DataBytes !== null ? ds64DataBytes : size };
      if (fmt !== null) break;
      warnings.push('data chunk comes before the fmt chunk');
    } else if (!QUIET_CHUNKS.has(id)) {
      warnings.push(`skipped unknown chunk ${JSON.stringify(id)} (${size} bytes)`);
    }
    let next = body + (id === 'data' ? data!.declared : size);
    if (next % 2 === 1) {
      // RIFF pads odd chunks to an even length; some writers forget the pad byte.
      const padded = readAt(next + 1, 4);
      const unpadded = readAt(next, 4);
      if (isChunkId(padded) || next + 1 >= fileSize || !isChunkId(unpadded)) next += 1;
      else warnings.push(`chunk ${JSON.stringify(id)} has an odd size and no pad byte`);
    }
    pos = next;
  }
  if (fmt === null) {
    throw new TapwardenError(data === null ? 'TW_ERR_WAV_TRUNCATED' : 'TW_ERR_WAV_NOT_RIFF', { file, reason: 'no fmt chunk' });
  }
  if (data === null) throw new TapwardenError('TW_ERR_WAV_TRUNCATED', { file, reason: 'no data chunk' });
  if (fmt.declaredAlign !== fmt.blockAlign) {
    warnings.push(`fmt block align says ${fmt.declaredAlign} but ${fmt.channels} x ${fmt.bitsPerSample}-bit samples take ${fmt.blockAlign}; using ${fmt.blockAlign}`);
  }
  const available = Math.max(0, fileSize - data.offset);
  let dataBytes = data.declared;
  if (dataBytes === 0 || dataBytes === 0xffffffff || dataBytes > available) {
    if (available > 0) {
      warnings.push(
        `data chunk size field says ${dataBytes} bytes but ${available} follow it; reading to the end of the file (was the recorder stopped abruptly?)`,
      );
    }
    dataBytes = available;
  }
  const frames = Math.floor(dataBytes / fmt.blockAlign);
  const tail = dataBytes - frames * fmt.blockAlign;
  if (tail > 0) warnings.push(`the last ${tail} byte(s) of the data chunk do not make a whole frame and are ignored`);
  const { declaredAlign: _unused, ...format } = fmt;
  return { format, dataOffset: data.offset, dataBytes: frames * fmt.blockAlign, frames, warnings };
}
