import { renameSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { WelchMultiCross, bandBounds, replaySpectrumStride, spectrumSegment } from '../analysis/welch.js';
import { measurementChannels, referenceChannels, type Config } from '../config/schema.js';
import { weightLimitOf } from '../dsp/kernels.js';
import { INPUT_LIMIT } from '../dsp/level.js';
import { engineSettingsOf } from '../engine/settings.js';
import { TapwardenError, oneLine, quote, type Warning } from '../errors.js';
import { makeDirectory } from '../io/files.js';
import { WavReader } from '../io/wav/reader.js';
import { BandSink } from '../run/bands.js';
import type { CaptureFile } from '../run/capture.js';
import { decodeState } from '../run/state.js';
import { checkChannels, checkLmsStep, scanReferences, type FrameRange, type ReferenceScan } from '../run/preflight.js';
import { Run } from '../run/run.js';
import { DecisionLog, WavOutputs } from '../run/sinks.js';
import { SummarySink, type Judgement } from '../run/summary.js';
import { VERSION } from '../version.js';
import type { Summary } from './summary.js';

/** One configuration to replay, named after its file. */
export interface Policy {
  readonly name: string;
  readonly config: Config;
  readonly configFile: string;
}

/** A part of the recording, in seconds; either end may be left open. */
export interface SecondsRange {
  readonly fromSeconds?: number;
  readonly toSeconds?: number;
}

export interface ReplayOptions {
  readonly recording: string;
  readonly policies: readonly Policy[];
  /** Where outputs go: directly (one policy) or in a folder per policy. */
  readonly outDir: string;
  /** The threshold every policy's clean path is judged against (one for all). */
  readonly judge: Judgement;
  readonly range?: SecondsRange;
  readonly blockFrames?: number;
  readonly onProgress?: (framesDone: number, framesTotal: number) => void;
  /** false: write nothing, return the summaries (sweeps keep them themselves). Default true. */
  readonly files?: boolean;
  /**
   * true: a policy whose step the pre-flight check refuses is left out and reported in
   * `refused` instead of failing the replay (a sweep cell fails, not the sweep).
   */
  readonly skipRefused?: boolean;
  /**
   * A captured episode's side file: every run starts from the state its channel's live run had at
   * the capture's first frame (src/run/capture.ts), so the decisions are the live ones.
   */
  readonly resume?: { file: string; capture: CaptureFile };
  /**
   * A recording of the wanted signal alone (same rate and start): per-band survival. Channel i is
   * measurement channel i's truth when it has one per measurement channel; else channel 0 is all's.
   */
  readonly truth?: string;
}

export interface ReplayResult {
  /** One per policy and measurement channel, channels of a policy together in configured order. */
  readonly summaries: Summary[];
  /** Per summary, the folder its files were written to. */
  readonly dirs: string[];
  /** The recording was decoded once: reads of the file for all policies together. */
  readonly reads: number;
  readonly spectrum: { frequencies: number[]; psd: number[] };
  readonly sampleRate: number;
  /** Warnings about the input and the pre-flight checks (each output's own are in its summary). */
  readonly warnings: Warning[];
  /** With skipRefused: the policies the pre-flight checks refused, with the coded error. */
  readonly refused: { policy: string; error: TapwardenError }[];
}

/** Frames [from, to) for a range in seconds; throws TW_ERR_USAGE for one outside the recording. */
export function framesOf(range: SecondsRange | undefined, frames: number, rate: number, file: string): FrameRange {
  const duration = frames / rate;
  const from = range?.fromSeconds ?? 0;
  const to = range?.toSeconds ?? duration;
  if (!(from >= 0) || !(from < duration)) {
    throw new TapwardenError('TW_ERR_USAGE', { detail: `--from ${quote(from)} is not allowed for ${file}; allowed: 0 <= from < ${duration.toFixed(3)} s (its length)` });
  }
  if (!(to > from)) throw new TapwardenError('TW_ERR_USAGE', { detail: `--to ${quote(to)} is not allowed; allowed: a time after --from (${from} s)` });
  return { from: Math.round(from * rate), to: Math.min(frames, Math.round(to * rate)) };
}

/**
 * Replays a recording through one run per policy and measurement channel as fast as the CPU
 * allows: each block is decoded once and fed to every run. Each run writes clean.wav,
 * adaptive.wav and decisions.ndjson as it goes, and summary.json at the end, in its policy's
 * folder (ch<N>/ inside it with several measurement channels).
 */
export function replay(opts: ReplayOptions): ReplayResult {
  const started = process.hrtime.bigint();
  const { recording, policies, outDir } = opts;
  const first = policies[0]!;
  for (const p of policies) {
    if (JSON.stringify(p.config.input) !== JSON.stringify(first.config.input)) {
      throw new TapwardenError('TW_ERR_CONFIG_VALUE', {
        file: p.configFile,
        detail: `input = ${quote(p.config.input)} is not allowed; allowed: the same input channels as ${first.name} (${JSON.stringify(first.config.input)})`,
      });
    }
  }
  const reader = WavReader.open(recording);
  try {
    const rate = reader.format.sampleRate;
    checkChannels(reader.format.channels, first.config, recording);
    const range = framesOf(opts.range, reader.frames, rate, recording);
    const warnings: Warning[] = reader.warnings.map((message) => ({ code: 'TW_WARN_INPUT', message }));
    let scans: ReferenceScan[] | null = null;
    const refused: ReplayResult['refused'] = [];
    const admitted: Policy[] = [];
    for (const p of policies) {
      if (p.config.filter.algorithm === 'lms') {
        scans ??= scanReferences(reader, referenceChannels(first.config), range);
        try {
          for (const message of checkLmsStep(scans, p.config, p.configFile, rate)) warnings.push({ code: 'TW_WARN_STEP', message: `${p.name}: ${message}` });
        } catch (err) {
          if (!opts.skipRefused || !(err instanceof TapwardenError)) throw err;
          refused.push({ policy: p.name, error: err });
          continue;
        }
      }
      admitted.push(p);
    }
    const files = opts.files ?? true;
    reader.seek(range.from);
    const readsBefore = reader.reads;
    const block = opts.blockFrames ?? 4096;
    const measured = measurementChannels(first.config);
    const refChannels = referenceChannels(first.config);
    const refs = refChannels.map(() => new Float64Array(block));
    const ref = refs[0]!;
    const des = measured.map(() => new Float64Array(block));
    const segment = spectrumSegment(rate);
    // Spectra from segments that do not overlap, strided to leave a few hundred of them
    // (replaySpectrumStride; README "summary.json", bands). Per measurement channel, the
    // coherence bound is the references' (their multiple coherence) with that channel.
    const stride = replaySpectrumStride(range.to - range.from, segment);
    const cross = new WelchMultiCross(segment, rate, stride, refs.length, measured.length);
    const truthReader = opts.truth === undefined ? null : WavReader.open(opts.truth);
    if (truthReader !== null) {
      if (truthReader.format.sampleRate !== rate || truthReader.frames < range.to) {
        const t = truthReader;
        t.close();
        throw new TapwardenError('TW_ERR_USAGE', {
          detail: `--truth ${quote(opts.truth)} is ${t.frames} frames at ${t.format.sampleRate} Hz; allowed: a recording at ${rate} Hz of at least ${range.to} frames, aligned with ${recording}`,
        });
      }
      truthReader.seek(range.from);
    }
    // One truth channel per measurement channel when the file has as many, else channel 0 for all.
    const truthChannels = truthReader === null ? [] : truthReader.format.channels >= measured.length ? measured.map((_, i) => i) : measured.map(() => 0);
    const truths = measured.map(() => new Float64Array(block));
    const total = range.to - range.from;
    const runs = admitted.flatMap((p) => measured.map((channel, ci) => {
      const policyDir = policies.length === 1 ? outDir : join(outDir, p.name);
      const dir = measured.length === 1 ? policyDir : join(policyDir, `ch${channel}`);
      if (files) makeDirectory(dir);
      const settings = engineSettingsOf(p.config, rate);
      const windowSamples = Math.max(1, Math.round(p.config.supervisor.windowSeconds * rate));
      const summary = new SummarySink({
        windowSeconds: windowSamples / rate,
        judge: opts.judge,
        weightLimit: weightLimitOf(settings.filter),
        meanBound: p.config.supervisor.maxWeightMean,
        expectedWindows: Math.floor(total / windowSamples),
      });
      const log = files ? new DecisionLog(join(dir, 'decisions.ndjson')) : null;
      const wavs = files ? new WavOutputs(join(dir, 'clean.wav'), join(dir, 'adaptive.wav'), rate, p.config.output.encoding) : null;
      const bands =
        p.config.output.signal === 'error'
          ? new BandSink(segment, stride, rate, truthReader === null ? null : truths[ci]!, p.config.filter.algorithm === 'pbfdaf' ? p.config.filter.blockSize : 0, block)
          : null;
      const sinks = [summary, ...(log && wavs ? [log, wavs] : []), ...(bands ? [bands] : [])];
      const run = new Run(settings, channel, sinks, block);
      if (opts.resume) resumeRun(run, opts.resume.file, opts.resume.capture);
      return { p, dir, channel, ci, run, summary, log, wavs, bands, engineNs: 0n };
    }));
    const channels = [...refChannels, ...measured];
    let done = 0;
    while (done < total) {
      const n = reader.read(channels, [ref.subarray(0, Math.min(block, total - done)), ...refs.slice(1), ...des]);
      if (n === 0) break;
      cross.push(refs, des, n);
      if (truthReader !== null) {
        for (const t of truths) t.fill(0);
        truthReader.read(truthChannels, truths.map((t) => t.subarray(0, n)));
      }
      for (const r of runs) {
        const t0 = process.hrtime.bigint();
        r.run.process(refs, des[r.ci]!, n);
        r.engineNs += process.hrtime.bigint() - t0;
      }
      done += n;
      opts.onProgress?.(done, total);
    }
    for (const r of runs) {
      r.wavs?.close();
      r.log?.close();
    }
    truthReader?.close();
    const crossResults = measured.map((_, ci) => cross.result(ci));
    const bounds = crossResults.map((c) => bandBounds(c, rate));
    const elapsedSeconds = Number(process.hrtime.bigint() - started) / 1e9;
    const summaries = runs.map((r) => {
      const { config } = r.p;
      const e = r.run.engine;
      const own = [...warnings];
      if (done < total) own.push({ code: 'TW_WARN_INPUT', message: `the file ended after ${done} of ${total} frames` });
      if (e.nonFiniteSamples > 0) own.push({ code: 'TW_WARN_INPUT', message: `${e.nonFiniteSamples} non-finite input samples (NaN, infinite) replaced by 0` });
      if (e.outOfRangeSamples > 0) {
        own.push({ code: 'TW_WARN_INPUT', message: `${e.outOfRangeSamples} input samples beyond +-${INPUT_LIMIT} full scale clamped to it` });
      }
      const clippedSamples = r.wavs?.clippedSamples ?? 0;
      const nonFiniteOut = r.wavs?.nonFiniteSamples ?? 0;
      if (clippedSamples > 0) {
        own.push({ code: 'TW_WARN_OUTPUT', message: `${r.p.name}: ${clippedSamples} output samples clipped to full scale in the ${config.output.encoding} output files` });
      }
      if (nonFiniteOut > 0) own.push({ code: 'TW_WARN_OUTPUT', message: `${r.p.name}: ${nonFiniteOut} non-finite output samples written as 0` });
      const f = r.summary.figures();
      const sat = e.saturations;
      const summary: Summary = {
        tool: `tapwarden ${VERSION}`,
        recording,
        policy: r.p.name,
        channel: r.channel,
        sampleRate: rate,
        samples: done,
        durationSeconds: done / rate,
        range: { fromSeconds: range.from / rate, toSeconds: (range.from + done) / rate },
        taps: config.filter.taps,
        latencySamples: config.filter.algorithm === 'pbfdaf' ? config.filter.blockSize : 0,
        config,
        warnings: own,
        windows: f.windows,
        handoffs: f.handoffs,
        judgement: f.judgement,
        cancellation: f.cancellation,
        maxAbsWeightMean: f.maxAbsWeightMean,
        events: f.events,
        eventsOmitted: f.eventsOmitted,
        series: f.series,
        seriesWindowsPerColumn: f.seriesWindowsPerColumn,
        weights: {
          adaptive: Array.from(e.adaptiveWeights()),
          clean: Array.from(e.cleanWeights.weights),
          cleanVersion: e.cleanWeights.version,
        },
        saturations: { adaptive: { weights: sat.adaptiveWeights, signal: sat.adaptiveSignal }, clean: { signal: sat.cleanSignal } },
        nonFiniteSamples: e.nonFiniteSamples,
        outOfRangeSamples: e.outOfRangeSamples,
        limits: { weight: weightLimitOf(r.run.settings.filter), weightMean: config.supervisor.maxWeightMean },
        drift: f.drift,
        bands: r.bands?.figures(bounds[r.ci]!) ?? null,
        truth: opts.truth ?? null,
        capture:
          opts.resume === undefined
            ? null
            : {
                file: opts.resume.file,
                startSeconds: opts.resume.capture.startSeconds,
                causes: opts.resume.capture.causes.map(({ cause, channel, streamSeconds, note }) => ({ cause, channel, streamSeconds, note })),
              },
        outputs: {
          clean: 'clean.wav',
          adaptive: 'adaptive.wav',
          decisions: 'decisions.ndjson',
          clippedSamples,
          nonFiniteSamples: nonFiniteOut,
        },
        engineSeconds: Number(r.engineNs) / 1e9,
        elapsedSeconds,
        realtimeFactor: elapsedSeconds > 0 ? done / rate / elapsedSeconds : 0,
      };
      if (files) writeJsonAtomic(join(r.dir, 'summary.json'), summary);
      return summary;
    });
    const spectrum = { frequencies: crossResults[0]!.frequencies, psd: crossResults[0]!.psdX };
    return {
      summaries,
      dirs: runs.map((r) => r.dir),
      reads: reader.reads - readsBefore,
      spectrum: { frequencies: Array.from(spectrum.frequencies), psd: Array.from(spectrum.psd) },
      sampleRate: rate,
      warnings,
      refused,
    };
  } finally {
    reader.close();
  }
}

/** Puts the capture's state of the run's channel into the run; TW_ERR_CAPTURE when it does not fit. */
function resumeRun(run: Run, file: string, capture: CaptureFile): void {
  const saved = capture.runs.find((r) => r.channel === run.channel);
  if (saved === undefined) {
    throw new TapwardenError('TW_ERR_CAPTURE', { file, detail: `holds no state of measurement channel ${run.channel}; allowed: channels ${capture.runs.map((r) => r.channel).join(', ')}` });
  }
  try {
    run.importState(decodeState(saved.state));
  } catch (err) {
    throw new TapwardenError('TW_ERR_CAPTURE', {
      file,
      detail: `does not fit this run: ${oneLine(err)}; allowed: the capture's own filter (taps, algorithm, arithmetic) and kernels (${capture.kernels})`,
    });
  }
  if (saved.pendingSettings !== null) run.engine.changeSettings(saved.pendingSettings);
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
