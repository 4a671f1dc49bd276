import { mkdirSync, renameSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { autocorrelation, toeplitzLambdaMax } from '../analysis/correlation.js';
import type { Config } from '../config/schema.js';
import { lmsStepBound } from '../dsp/bounds.js';
import { DualPathEngine } from '../engine/dualPath.js';
import { engineSettingsOf } from '../engine/settings.js';
import { TapwardenError, oneLine } from '../errors.js';
import { WavReader } from '../io/wav/reader.js';
import { WavWriter } from '../io/wav/writer.js';
import { VERSION } from '../version.js';
import { SummaryCollector, type Summary } from './summary.js';

export interface ReplayOptions {
  readonly recording: string;
  readonly config: Config;
  /** Where the config came from, for error messages. */
  readonly configFile: string;
  readonly outDir: string;
  readonly blockFrames?: number;
  readonly onProgress?: (framesDone: number, framesTotal: number) => void;
}

/** Seconds of reference the LMS step check reads. */
const BOUND_SCAN_SECONDS = 10;

/** Throws TW_ERR_WAV_CHANNEL unless both configured channels exist. */
export function checkChannels(reader: WavReader, config: Config, file: string): void {
  const channels = reader.format.channels;
  for (const key of ['referenceChannel', 'desiredChannel'] as const) {
    const value = config.input[key];
    if (value >= channels) {
      throw new TapwardenError('TW_ERR_WAV_CHANNEL', { file, channels, last: channels - 1, key: `input.${key}`, value });
    }
  }
}

/**
 * LMS is stable in the mean only for mu < 2 / (lambda_max + gamma); lambda_max comes from the
 * first seconds of this recording's reference. NLMS's bound (mu < 2) is checked with the config.
 */
export function checkLmsStep(file: string, config: Config, configFile: string): void {
  const { algorithm, taps, step, leak } = config.filter;
  if (algorithm !== 'lms') return;
  const reader = WavReader.open(file);
  try {
    const n = Math.min(reader.frames, Math.round(BOUND_SCAN_SECONDS * reader.format.sampleRate));
    const x = new Float64Array(n);
    reader.read([config.input.referenceChannel], [x]);
    for (let i = 0; i < n; i++) if (!Number.isFinite(x[i])) x[i] = 0;
    const lambdaMax = toeplitzLambdaMax(autocorrelation(x, taps));
    const bound = lmsStepBound(lambdaMax, leak);
    if (step >= bound) {
      throw new TapwardenError('TW_ERR_CONFIG_STEP_BOUND', {
        file: configFile,
        step,
        bound: bound.toPrecision(4),
        lambdaMax: lambdaMax.toPrecision(4),
      });
    }
  } finally {
    reader.close();
  }
}

/** Replays a recording through the engine as fast as the CPU allows; writes the outputs. */
export function replay(opts: ReplayOptions): Summary {
  const { recording, config, outDir } = opts;
  const reader = WavReader.open(recording);
  try {
    checkChannels(reader, config, recording);
    checkLmsStep(recording, config, opts.configFile);
    try {
      mkdirSync(outDir, { recursive: true });
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: outDir, reason: oneLine(err) });
    }
    const rate = reader.format.sampleRate;
    const collector = new SummaryCollector();
    const engine = new DualPathEngine(engineSettingsOf(config, rate), collector);
    const block = opts.blockFrames ?? 4096;
    const ref = new Float64Array(block);
    const des = new Float64Array(block);
    const cleanOut = new Float64Array(block);
    const adaptiveOut = new Float64Array(block);
    const cleanWav = new WavWriter(join(outDir, 'clean.wav'), rate, 1, config.output.encoding);
    const adaptiveWav = new WavWriter(join(outDir, 'adaptive.wav'), rate, 1, config.output.encoding);
    const channels = [config.input.referenceChannel, config.input.desiredChannel];
    const started = process.hrtime.bigint();
    let done = 0;
    for (;;) {
      const n = reader.read(channels, [ref, des]);
      if (n === 0) break;
      engine.process(ref, des, cleanOut, adaptiveOut, n);
      cleanWav.write([cleanOut], n);
      adaptiveWav.write([adaptiveOut], n);
      done += n;
      opts.onProgress?.(done, reader.frames);
    }
    cleanWav.close();
    adaptiveWav.close();
    const elapsedSeconds = Number(process.hrtime.bigint() - started) / 1e9;
    const warnings = [...reader.warnings];
    if (done < reader.frames) warnings.push(`the file ended after ${done} of ${reader.frames} frames`);
    const clipped = cleanWav.clipped + adaptiveWav.clipped;
    if (clipped > 0) warnings.push(`${clipped} output samples clipped to full scale in the ${config.output.encoding} output files`);
    const summary: Summary = {
      tool: `tapwarden ${VERSION}`,
      recording,
      sampleRate: rate,
      samples: done,
      durationSeconds: done / rate,
      taps: config.filter.taps,
      config,
      warnings,
      handoffs: collector.counts,
      events: collector.events,
      series: collector.series,
      weights: {
        adaptive: Array.from(engine.adaptiveWeights()),
        clean: Array.from(engine.cleanWeights.weights),
        cleanVersion: engine.cleanWeights.version,
      },
      saturations: { adaptive: engine.adaptiveSaturations, clean: engine.cleanSaturations },
      nonFiniteSamples: engine.nonFiniteSamples,
      outputs: { clean: 'clean.wav', adaptive: 'adaptive.wav', clippedSamples: clipped },
      elapsedSeconds,
      realtimeFactor: elapsedSeconds > 0 ? done / rate / elapsedSeconds : Infinity,
    };
    writeJsonAtomic(join(outDir, 'summary.json'), summary);
    return summary;
  } finally {
    reader.close();
  }
}

/** Writes JSON through a temporary file and a rename, so a reader never sees half a file. */
export function writeJsonAtomic(file: string, value: unknown): void {
  const tmp = `${file}.tmp-${process.pid}`;
  try {
    writeFileSync(tmp, JSON.stringify(value, null, 1) + '\n');
    renameSync(tmp, file);
  } catch (err) {
    throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file, reason: oneLine(err) });
  }
}
