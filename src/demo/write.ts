import { copyFileSync, existsSync, mkdtempSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { VERSION } from '../version.js';
import { DEFAULT_CONFIG_PATH } from '../config/load.js';
import { TapwardenError, oneLine } from '../errors.js';
import { makeDirectory } from '../io/files.js';
import { WavWriter } from '../io/wav/writer.js';
import { BENCH, generateBench } from './scenario.js';

export const DEMO_RECORDING = 'bench-trial.wav';

/** Configs written beside the recording: name, purpose, overrides of the default. */
const DEMO_CONFIGS: ReadonlyArray<{ file: string; comment: string; body: string }> = [
  {
    file: 'q15-drift.yaml',
    comment: '16-bit fixed point with truncating arithmetic and no leak: the weight mean drifts.',
    body: 'filter:\n  algorithm: lms\n  step: 0.05\n  arithmetic: q15\n  rounding: truncate\n',
  },
  {
    file: 'two-channels.yaml',
    comment: 'Both measurement accelerometers (channels 1 and 2), each with its own dual path and supervisor.',
    body: 'input:\n  desiredChannels: [1, 2]\n',
  },
  {
    file: 'rig.yaml',
    comment: 'The whole rig: both measurement channels, each cleaned of the motor (channel 0) and the pump (channel 3).',
    body: 'input:\n  referenceChannels: [0, 3]\n  desiredChannels: [1, 2]\n',
  },
  {
    file: 'q15-leak.yaml',
    comment: 'The same, with the fixed-point leak w <- w - (w >> 14): the weights stay bounded.',
    body: 'filter:\n  algorithm: lms\n  step: 0.05\n  arithmetic: q15\n  rounding: truncate\n  leakShift: 14\n',
  },
];

/** Writes the demo recording (16-bit: motor reference, measurement, flange measurement, pump reference), its truth and configs. */
export function writeDemo(outDir: string): string[] {
  makeDirectory(outDir);
  const rec = generateBench(BENCH);
  const wav = new WavWriter(join(outDir, DEMO_RECORDING), BENCH.sampleRate, 4, 'pcm16');
  wav.write([rec.reference, rec.desired, rec.flange, rec.pump], rec.reference.length);
  wav.close();
  // The wanted signal as each measurement channel hears it (the flange at half amplitude).
  const truth = new WavWriter(join(outDir, 'bench-trial-signal.wav'), BENCH.sampleRate, 2, 'float32');
  truth.write([rec.signal, rec.signal.map((v) => 0.5 * v)], rec.signal.length);
  truth.close();
  const written = [DEMO_RECORDING, 'bench-trial-signal.wav', 'bench-trial.yaml'];
  copyFileSync(DEFAULT_CONFIG_PATH, join(outDir, 'bench-trial.yaml'));
  for (const c of DEMO_CONFIGS) {
    writeFileSync(join(outDir, c.file), `# ${c.comment}\n# Unset keys take config/default.yaml's values.\n${c.body}`);
    written.push(c.file);
  }
  return written.map((f) => join(outDir, f));
}

/**
 * The demo recording in one cached copy per tapwarden version under the temporary directory
 * (it is deterministic): written once, atomically (a rename of a finished directory), and
 * shared by every serve that streams it.
 */
export function cachedDemo(): string {
  const dir = join(tmpdir(), `tapwarden-demo-${VERSION}`);
  const file = join(dir, DEMO_RECORDING);
  if (existsSync(file)) return file;
  const work = mkdtempSync(join(tmpdir(), 'tapwarden-demo-tmp-'));
  try {
    writeDemo(work);
    renameSync(work, dir);
  } catch (err) {
    rmSync(work, { recursive: true, force: true });
    // Another process finished first: its copy is the same.
    if (!existsSync(file)) throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: dir, reason: oneLine(err) });
  }
  return file;
}
