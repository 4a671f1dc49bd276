import { createHash } from 'node:crypto';
import { readdirSync, statSync, unlinkSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import type { Config } from '../config/schema.js';
import { makeDirectory } from '../io/files.js';
import { WavWriter } from '../io/wav/writer.js';
import { CAPTURE_FORMAT, sideFileOf, type CaptureFile } from '../run/capture.js';
import { encodeState } from '../run/state.js';
import { VERSION } from '../version.js';
import type { Episode } from './captureRecorder.js';

const NAME = /^capture-\d{8}T\d{6}(\.\d+)?Z-[a-z+]+-ch[\d-]+\.wav$/;

/**
 * The main thread's side of captured episodes: each finished episode becomes CAPTURE.wav (the
 * input channels, 64-bit float so every sample is kept as the engine saw it) and CAPTURE.json
 * (src/run/capture.ts) in capture.dir, named by wall time, cause and channels, and the oldest captures are
 * removed while there are more than capture.maxFiles or capture.maxBytes in all.
 */
export class CaptureWriter {
  constructor(
    private readonly config: Config,
    private readonly sampleRate: number,
    private readonly kernels: 'fast' | 'reference',
  ) {}

  /** Writes one episode; returns its WAV path. Throws TW_ERR_OUTPUT_WRITE when the disk refuses. */
  write(e: Episode): string {
    const dir = this.config.capture.dir!;
    makeDirectory(dir);
    const stamp = new Date().toISOString().replace(/[-:]/g, '');
    const causes = [...new Set(e.causes.map((c) => c.cause))].join('+');
    // The channels in the name: with stream.workers > 1 each thread's episode of one mark closes at once.
    const wav = join(dir, `capture-${stamp}-${causes}-ch${e.runs.map((r) => r.channel).join('-')}.wav`);
    const w = new WavWriter(wav, this.sampleRate, e.channels.length, 'float64');
    w.write(e.channels, e.frames);
    w.close();
    // The live settings in effect, on the config's own keys (the engine's view has a few more).
    const pick = <T extends object>(keys: T, from: object): T => Object.fromEntries(Object.keys(keys).map((k) => [k, (from as Record<string, unknown>)[k]])) as T;
    // The episode's own measurement channels (with stream.workers, each thread captures its group's).
    const channels = e.runs.map((r) => r.channel);
    const config: Config = {
      ...this.config,
      input: { ...this.config.input, desiredChannel: channels[0]!, desiredChannels: channels.length > 1 ? channels : null },
      stream: { ...this.config.stream, workers: 1 },
      filter: pick(this.config.filter, e.settings.filter),
      supervisor: pick(this.config.supervisor, e.settings.supervisor),
    };
    const side: CaptureFile = {
      format: CAPTURE_FORMAT,
      tool: `tapwarden ${VERSION}`,
      savedAt: new Date().toISOString(),
      causes: e.causes,
      startSample: e.startSample,
      startSeconds: e.startSample / this.sampleRate,
      frames: e.frames,
      sampleRate: this.sampleRate,
      configHash: createHash('sha256').update(JSON.stringify(config)).digest('hex'),
      config,
      kernels: this.kernels,
      runs: e.runs.map((r) => ({ ...r, state: encodeState(r.state) })),
    };
    writeFileSync(sideFileOf(wav), JSON.stringify(side) + '\n');
    this.rotate();
    return wav;
  }

  /** Removes the oldest captures (by name: wall time) beyond the file and byte limits. */
  rotate(): void {
    const { dir, maxFiles, maxBytes } = this.config.capture;
    const wavs = readdirSync(dir!)
      .filter((f) => NAME.test(f))
      .sort();
    const sizes = wavs.map((f) => {
      try {
        return statSync(join(dir!, f)).size + statSync(sideFileOf(join(dir!, f))).size;
      } catch {
        return 0;
      }
    });
    let total = sizes.reduce((a, b) => a + b, 0);
    // The newest capture stays even when it alone passes maxBytes.
    for (let i = 0; i < wavs.length - 1 && (wavs.length - i > maxFiles || total > maxBytes); i++) {
      for (const f of [join(dir!, wavs[i]!), sideFileOf(join(dir!, wavs[i]!))]) {
        try {
          unlinkSync(f);
        } catch {
          // Gone already or not ours to remove: the next rotation tries again.
        }
      }
      total -= sizes[i]!;
    }
  }
}
