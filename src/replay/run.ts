import { mkdirSync, renameSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { autocorrelation, toeplitzLambdaMax } from '../analysis/correlation.js';
import type { Config } from '../config/schema.js';
import { lmsStepBound } from '../dsp/bounds.js';
import { WelchPsd } from '../analysis/welch.js';
import { weightLimitOf } from '../dsp/kernels.js';
import { DualPathEngine } from '../engine/dualPath.js';
import { engineSettingsOf } from '../engine/settings.js';
import { TapwardenError, oneLine } from '../errors.js';
import { WavReader } from '../io/wav/reader.js';
import { WavWriter } from '../io/wav/writer.js';
import { VERSION } from '../version.js';
import { SummaryCollector, type Summary } from './summary.js';

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

/** One configuration to replay, named after its file. */
export interface Policy {
  readonly name: string;
  readonly config: Config;
  readonly configFile: string;
}

export interface MultiReplayOptions {
  readonly recording: string;
  readonly policies: readonly Policy[];
  /** Where outputs go: directly (one policy) or in a folder per policy. */
  readonly outDir: string;
  readonly blockFrames?: number;
  readonly onProgress?: (framesDone: number, framesTotal: number) => void;
}

export interface ReplayResult {
  readonly summaries: Summary[];
  /** Per policy, the folder its files were written to. */
  readonly dirs: string[];
  /** The recording was decoded once: reads of the file for all policies together. */
  readonly reads: number;
  readonly spectrum: { frequencies: number[]; psd: number[] };
  readonly sampleRate: number;
}

/** Welch segment for the report's reference spectrum: about 1/8 s, a power of two. */
function spectrumSegment(rate: number): number {
  return Math.min(8192, Math.max(256, 2 ** Math.ceil(Math.log2(rate / 8))));
}

function mkdir(dir: string): void {
  try {
    mkdirSync(dir, { recursive: true });
  } catch (err) {
    throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: dir, reason: oneLine(err) });
  }
}

/**
 * Replays a recording through one engine per policy as fast as the CPU allows: each block is
 * decoded once and fed to every engine. Writes each policy's clean.wav, adaptive.wav and
 * summary.json.
 */
export function replayPolicies(opts: MultiReplayOptions): ReplayResult {
  const { recording, policies, outDir } = opts;
  const first = policies[0]!;
  for (const p of policies) {
    if (JSON.stringify(p.config.input) !== JSON.stringify(first.config.input)) {
      throw new TapwardenError('TW_ERR_CONFIG_VALUE', {
        file: p.configFile,
        detail: `input = ${JSON.stringify(p.config.input)} is not allowed; allowed: the same input channels as ${first.name} (${JSON.stringify(first.config.input)})`,
      });
    }
  }
  const reader = WavReader.open(recording);
  try {
    checkChannels(reader, first.config, recording);
    for (const p of policies) checkLmsStep(recording, p.config, p.configFile);
    const rate = reader.format.sampleRate;
    const block = opts.blockFrames ?? 4096;
    const ref = new Float64Array(block);
    const des = new Float64Array(block);
    const cleanOut = new Float64Array(block);
    const adaptiveOut = new Float64Array(block);
    const psd = new WelchPsd(spectrumSegment(rate), rate);
    const runs = policies.map((p) => {
      const dir = policies.length === 1 ? outDir : join(outDir, p.name);
      mkdir(dir);
      const settings = engineSettingsOf(p.config, rate);
      const collector = new SummaryCollector(p.config, weightLimitOf(settings.filter));
      const engine = new DualPathEngine(settings, collector);
      const cleanWav = new WavWriter(join(dir, 'clean.wav'), rate, 1, p.config.output.encoding);
      const adaptiveWav = new WavWriter(join(dir, 'adaptive.wav'), rate, 1, p.config.output.encoding);
      return { p, dir, collector, engine, cleanWav, adaptiveWav, elapsed: 0n };
    });
    const channels = [first.config.input.referenceChannel, first.config.input.desiredChannel];
    let done = 0;
    for (;;) {
      const n = reader.read(channels, [ref, des]);
      if (n === 0) break;
      psd.push(ref, n);
      for (const r of runs) {
        const t0 = process.hrtime.bigint();
        r.engine.process(ref, des, cleanOut, adaptiveOut, n);
        r.elapsed += process.hrtime.bigint() - t0;
        r.cleanWav.write([cleanOut], n);
        r.adaptiveWav.write([adaptiveOut], n);
      }
      done += n;
      opts.onProgress?.(done, reader.frames);
    }
    const summaries = runs.map((r) => {
      r.cleanWav.close();
      r.adaptiveWav.close();
      const { config } = r.p;
      const elapsedSeconds = Number(r.elapsed) / 1e9;
      const warnings = [...reader.warnings];
      if (done < reader.frames) warnings.push(`the file ended after ${done} of ${reader.frames} frames`);
      const clipped = r.cleanWav.clipped + r.adaptiveWav.clipped;
      if (clipped > 0) warnings.push(`${clipped} output samples clipped to full scale in the ${config.output.encoding} output files`);
      const summary: Summary = {
        tool: `tapwarden ${VERSION}`,
        recording,
        policy: r.p.name,
        sampleRate: rate,
        samples: done,
        durationSeconds: done / rate,
        taps: config.filter.taps,
        latencySamples: config.filter.algorithm === 'pbfdaf' ? config.filter.blockSize : 0,
        config,
        warnings,
        handoffs: r.collector.counts,
        events: r.collector.events,
        series: r.collector.series,
        weights: {
          adaptive: Array.from(r.engine.adaptiveWeights()),
          clean: Array.from(r.engine.cleanWeights.weights),
          cleanVersion: r.engine.cleanWeights.version,
        },
        saturations: { adaptive: r.engine.adaptiveSaturations, clean: r.engine.cleanSaturations },
        nonFiniteSamples: r.engine.nonFiniteSamples,
        limits: r.collector.limits,
        drift: r.collector.drift(),
        outputs: { clean: 'clean.wav', adaptive: 'adaptive.wav', clippedSamples: clipped },
        elapsedSeconds,
        realtimeFactor: elapsedSeconds > 0 ? done / rate / elapsedSeconds : 0,
      };
      writeJsonAtomic(join(r.dir, 'summary.json'), summary);
      return summary;
    });
    const spectrum = psd.result();
    return {
      summaries,
      dirs: runs.map((r) => r.dir),
      reads: reader.reads,
      spectrum: { frequencies: Array.from(spectrum.frequencies), psd: Array.from(spectrum.psd) },
      sampleRate: rate,
    };
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
