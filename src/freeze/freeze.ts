import { createHash } from 'node:crypto';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { measurementChannels, referenceChannels, type Config } from '../config/schema.js';
import { fixedConstants, formatOf } from '../dsp/fixedKernel.js';
import { float32Constants } from '../dsp/float32Kernel.js';
import { saturate, scaleRound } from '../dsp/fixed.js';
import { createAdaptiveKernel, createFirKernel } from '../dsp/kernels.js';
import { INPUT_LIMIT } from '../dsp/level.js';
import type { AdaptiveSpec } from '../dsp/types.js';
import { TapwardenError, oneLine } from '../errors.js';
import { makeDirectory } from '../io/files.js';
import { WavReader } from '../io/wav/reader.js';
import { replay, writeJsonAtomic } from '../replay/replay.js';
import { checkChannels } from '../run/preflight.js';
import { VERSION } from '../version.js';
import { hexFloat, header, source } from './cport.js';

/** The arithmetics a firmware port exists for. */
export const PORTABLE_ARITHMETICS = ['q15', 'q31', 'float32'] as const;

export interface FreezeOptions {
  readonly config: Config;
  readonly configFile: string;
  /** The recording the weights are reached on (optional) and the vectors come from. */
  readonly recording: string | null;
  /** Writes the demo and returns its recording: the vectors' source when `recording` is null (called after the checks). */
  readonly demo: () => string;
  readonly outDir: string;
  readonly vectorSeconds: number;
}

export interface FreezeResult {
  readonly files: string[];
  readonly vectorSamples: number;
  readonly handoffEvery: number;
}

/** Refuses what has no port: pbfdaf, float64, noise injection (its generator is floating point). */
export function checkPortable(config: Config, file: string): void {
  const f = config.filter;
  const refuse = (detail: string) => {
    throw new TapwardenError('TW_ERR_FREEZE', { file, detail });
  };
  if (f.algorithm === 'pbfdaf') refuse('filter.algorithm pbfdaf has no C port; allowed: lms, nlms');
  if (!(PORTABLE_ARITHMETICS as readonly string[]).includes(f.arithmetic)) {
    refuse(`filter.arithmetic ${f.arithmetic} has no C port; allowed: ${PORTABLE_ARITHMETICS.join(', ')}`);
  }
  if (f.noiseInjectionDb !== null) {
    refuse('filter.noiseInjectionDb is set: the injected noise comes from a floating-point generator the port cannot reproduce bit for bit; allowed: null (inject noise in the firmware, ahead of tw_filter_step)');
  }
  if (config.input.referenceChannels !== null && config.input.referenceChannels.length > 1) {
    refuse(`input.referenceChannels = ${JSON.stringify(config.input.referenceChannels)}: the C port filters one reference; allowed: one reference channel`);
  }
  if (config.input.desiredChannels !== null && config.input.desiredChannels.length > 1) {
    refuse(`input.desiredChannels = ${JSON.stringify(config.input.desiredChannels)}: a frozen filter is one channel's; allowed: one measurement channel (input.desiredChannel N, or desiredChannels [N])`);
  }
}

/** The engine's input scrub (non-finite to 0, clamp to +-INPUT_LIMIT), then the format's grid. */
export function toFormat(v: number, spec: AdaptiveSpec): number {
  const x = Number.isFinite(v) ? Math.max(-INPUT_LIMIT, Math.min(INPUT_LIMIT, v)) : 0;
  const fmt = formatOf(spec.arithmetic);
  return fmt === null ? Math.fround(x) : saturate(scaleRound(x, fmt.fracBits, spec.rounding), fmt);
}

/** Whether toFormat clipped v to the format's range (a fixed-point input store that saturated). */
function clipsOnInput(v: number, spec: AdaptiveSpec): boolean {
  const fmt = formatOf(spec.arithmetic);
  if (fmt === null) return false;
  const raw = scaleRound(Number.isFinite(v) ? Math.max(-INPUT_LIMIT, Math.min(INPUT_LIMIT, v)) : 0, fmt.fracBits, spec.rounding);
  return raw !== saturate(raw, fmt);
}

/** Replays the whole recording (the run layer, its pre-flight checks, no files); the clean weights it reached. */
function reachedWeights(config: Config, configFile: string, file: string): { weights: number[]; handoffs: number; seconds: number } {
  const judge = { minCancellationDb: config.supervisor.minCancellationDb, source: configFile };
  const [s] = replay({ recording: file, policies: [{ name: 'frozen', config, configFile }], outDir: '', judge, files: false }).summaries;
  return { weights: s!.weights.clean, handoffs: s!.handoffs.accepted, seconds: s!.durationSeconds };
}

/**
 * What the port must output on x, d (already on the format's grid), from the kernels replay runs
 * (held bit-exact to the reference kernels by the tests): both paths from `initial` weights, a
 * handoff after every `handoffEvery` samples, as check.c and the bench drive the port.
 */
export function portOutputs(spec: AdaptiveSpec, x: Float64Array, d: Float64Array, initial: ArrayLike<number>, handoffEvery: number) {
  const n = x.length;
  const adaptive = createAdaptiveKernel(spec);
  const fir = createFirKernel(spec);
  adaptive.setWeights(initial);
  fir.setWeights(initial);
  const y = new Float64Array(n);
  const ea = new Float64Array(n);
  const ec = new Float64Array(n);
  for (let i = 0; i < n; i += handoffEvery) {
    const end = Math.min(n, i + handoffEvery);
    adaptive.run(x, d, null, y, ea, i, end);
    fir.run(x, d, y, ec, i, end);
    if (end - i === handoffEvery) adaptive.copyTo(fir);
  }
  return { adaptive, fir, ea, ec };
}

interface Vectors {
  x: Float64Array;
  d: Float64Array;
  adaptive: Float64Array;
  clean: Float64Array;
  finalWeights: Float64Array;
  weightSaturations: number;
  signalSaturations: number;
  cleanSignalSaturations: number;
  /** Input samples that clipped on their way to the format (the caller's quantization, not the port's). */
  inputClips: number;
}

/**
 * The expected outputs of both paths on `seconds` of the recording, from the kernels replay runs
 * (held bit-exact to the reference kernels by the tests), starting from `initial` weights, with
 * a handoff after every `handoffEvery` samples.
 */
function makeVectors(spec: AdaptiveSpec, cfg: Config, file: string, seconds: number, initial: ArrayLike<number>, handoffEvery: number): Vectors {
  const reader = WavReader.open(file);
  try {
    checkChannels(reader.format.channels, cfg, file);
    const n = Math.min(reader.frames, Math.max(1, Math.round(seconds * reader.format.sampleRate)));
    const x = new Float64Array(n);
    const d = new Float64Array(n);
    reader.read([referenceChannels(cfg)[0]!, measurementChannels(cfg)[0]!], [x, d]);
    const fmt = formatOf(spec.arithmetic);
    const scale = fmt === null ? 1 : 2 ** -fmt.fracBits;
    let inputClips = 0;
    for (let i = 0; i < n; i++) {
      for (const v of [x, d]) {
        if (clipsOnInput(v[i]!, spec)) inputClips++;
        v[i] = toFormat(v[i]!, spec) * scale;
      }
    }
    const { adaptive, fir, ea, ec } = portOutputs(spec, x, d, initial, handoffEvery);
    return {
      x,
      d,
      adaptive: ea,
      clean: ec,
      finalWeights: adaptive.getWeights(),
      weightSaturations: adaptive.weightSaturations,
      signalSaturations: adaptive.signalSaturations,
      cleanSignalSaturations: fir.signalSaturations,
      inputClips,
    };
  } finally {
    reader.close();
  }
}

/** Real values as the port's words: Qf integers, or binary32 values. */
export function words(v: ArrayLike<number>, spec: AdaptiveSpec): number[] {
  const fmt = formatOf(spec.arithmetic);
  return Array.from(v, (w) => (fmt === null ? Math.fround(w) : Math.round(w * 2 ** fmt.fracBits)));
}

/** Interleaved columns as 4-byte little-endian words (int32, or binary32 bit patterns). */
export function packColumns(columns: Float64Array[], spec: AdaptiveSpec): Buffer {
  const n = columns[0]!.length;
  const buf = Buffer.alloc(4 * n * columns.length);
  const fmt = formatOf(spec.arithmetic);
  let o = 0;
  for (let i = 0; i < n; i++) {
    for (const c of columns) {
      if (fmt === null) buf.writeFloatLE(c[i]!, o);
      else buf.writeInt32LE(Math.round(c[i]! * 2 ** fmt.fracBits), o);
      o += 4;
    }
  }
  return buf;
}

function checkSource(spec: AdaptiveSpec, v: Vectors, handoffEvery: number): string {
  const float = formatOf(spec.arithmetic) === null;
  const expected = words(v.finalWeights, spec).map((w) => (float ? hexFloat(w) : String(w)));
  return `/* Generated by tapwarden ${VERSION} (tapwarden freeze). Runs the port on vectors/input.bin and
   compares both paths' outputs with vectors/expected.bin word for word, then the final
   weights and the saturation counters. Usage: check [VECTORS_DIR]. Exit 0 when all match. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include "tapwarden_filter.h"

#define SAMPLES ${v.x.length}L
#define HANDOFF_EVERY ${handoffEvery}L

static const tw_word expected_weights[TW_TAPS] = {
  ${expected.join(', ')}
};

static tw_filter_state state;

static unsigned char *slurp(const char *dir, const char *name, long bytes)
{
  char path[4096];
  unsigned char *b;
  FILE *f;
  sprintf(path, "%.4000s/%s", dir, name);
  f = fopen(path, "rb");
  if (f == NULL) { fprintf(stderr, "check: cannot open %s\\n", path); exit(2); }
  b = malloc((size_t)bytes);
  if (b == NULL || fread(b, 1, (size_t)bytes, f) != (size_t)bytes) { fprintf(stderr, "check: %s is shorter than %ld bytes\\n", path, bytes); exit(2); }
  fclose(f);
  return b;
}

/* Word i of a little-endian buffer, as the bit pattern. */
static uint32_t bits(const unsigned char *b, long i)
{
  const unsigned char *p = b + 4 * i;
  return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
}

static uint32_t bits_of(tw_sample v)
{
  ${float ? 'uint32_t u;\n  memcpy(&u, &v, 4);\n  return u;' : 'return (uint32_t)v;'}
}

static tw_sample sample(uint32_t u)
{
  ${float ? 'tw_sample v;\n  memcpy(&v, &u, 4);\n  return v;' : 'return u < 0x80000000u ? (tw_sample)u : -(tw_sample)(0xFFFFFFFFu - u) - 1;'}
}

int main(int argc, char **argv)
{
  const char *dir = argc > 1 ? argv[1] : "vectors";
  unsigned char *in = slurp(dir, "input.bin", 8 * SAMPLES);
  unsigned char *out = slurp(dir, "expected.bin", 8 * SAMPLES);
  long n;
  int k;
  tw_filter_init(&state);
  for (n = 0; n < SAMPLES; n++) {
    tw_sample x = sample(bits(in, 2 * n)), d = sample(bits(in, 2 * n + 1));
    uint32_t a = bits_of(tw_filter_step(&state, x, d));
    uint32_t c = bits_of(tw_filter_clean(&state, x, d));
    if (a != bits(out, 2 * n)) { printf("mismatch at sample %ld: adaptive output 0x%08lx, expected 0x%08lx\\n", n, (unsigned long)a, (unsigned long)bits(out, 2 * n)); return 1; }
    if (c != bits(out, 2 * n + 1)) { printf("mismatch at sample %ld: clean output 0x%08lx, expected 0x%08lx\\n", n, (unsigned long)c, (unsigned long)bits(out, 2 * n + 1)); return 1; }
    if ((n + 1) % HANDOFF_EVERY == 0) tw_filter_handoff(&state);
  }
  for (k = 0; k < TW_TAPS; k++) {
    if (bits_of(state.w[k]) != bits_of(expected_weights[k])) { printf("mismatch in final weight %d\\n", k); return 1; }
  }
  if (state.weight_saturations != ${v.weightSaturations}u || state.signal_saturations != ${v.signalSaturations}u || state.clean_signal_saturations != ${v.cleanSignalSaturations}u) {
    printf("mismatch in saturation counts: weights %lu, signal %lu, clean signal %lu; expected ${v.weightSaturations}, ${v.signalSaturations}, ${v.cleanSignalSaturations}\\n",
           (unsigned long)state.weight_saturations, (unsigned long)state.signal_saturations, (unsigned long)state.clean_signal_saturations);
    return 1;
  }
  printf("ok: %ld samples, both paths, final weights and saturation counts match bit for bit (${v.weightSaturations} weight, ${v.signalSaturations} signal, ${v.cleanSignalSaturations} clean signal saturations)\\n", n);
  free(in);
  free(out);
  return 0;
}
`;
}

/** The health thresholds in the integer domain of the format (README "freeze"). */
function healthSettings(config: Config, windowSamples: number, spec: AdaptiveSpec) {
  const s = config.supervisor;
  const fmt = formatOf(spec.arithmetic);
  const ratio = (db: number) => 10 ** (-db / 10);
  const base = {
    windowSamples,
    passesRequired: s.passesRequired,
    rollbackAfter: s.rollbackAfter,
    minCancellationDb: s.minCancellationDb,
    marginDb: s.marginDb,
    maxWeightMean: s.maxWeightMean,
    minReferencePowerDb: s.minReferencePowerDb,
  };
  if (fmt === null) return { ...base, errorToDesiredMax: ratio(s.minCancellationDb), adaptiveToCleanMax: ratio(s.marginDb) };
  return {
    ...base,
    energyFracBits: 30,
    errorToDesiredMaxQ30: Math.round(ratio(s.minCancellationDb) * 2 ** 30),
    adaptiveToCleanMaxQ30: Math.round(ratio(s.marginDb) * 2 ** 30),
    maxWeightSum: Math.floor(s.maxWeightMean * spec.taps * 2 ** fmt.fracBits),
    minReferenceEnergyQ30: s.minReferencePowerDb === null ? null : Math.round(10 ** (s.minReferencePowerDb / 10) * windowSamples * 2 ** 30),
  };
}

function sha256(file: string): string {
  return createHash('sha256').update(readFileSync(file)).digest('hex');
}

function write(file: string, data: string | Buffer): void {
  try {
    writeFileSync(file, data);
  } catch (err) {
    throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file, reason: oneLine(err) });
  }
}

/** Writes settings.json, the C port, the vectors and check.c to opts.outDir. */
export function freeze(opts: FreezeOptions): FreezeResult {
  const { config, outDir } = opts;
  checkPortable(config, opts.configFile);
  const spec: AdaptiveSpec = config.filter;
  const fmt = formatOf(spec.arithmetic);
  const vectorFile = opts.recording ?? opts.demo();
  const probe = WavReader.open(vectorFile);
  const rate = probe.format.sampleRate;
  probe.close();
  const windowSamples = Math.max(1, Math.round(config.supervisor.windowSeconds * rate));
  const reached = opts.recording === null ? null : reachedWeights(config, opts.configFile, opts.recording);
  const initial = reached?.weights ?? new Array<number>(spec.taps).fill(0);
  const initialWords = words(initial, spec);
  const handoffEvery = windowSamples;
  const vectors = makeVectors(spec, config, vectorFile, opts.vectorSeconds, initial, handoffEvery);
  makeDirectory(join(outDir, 'vectors'));
  const files = ['settings.json', 'tapwarden_filter.h', 'tapwarden_filter.c', 'check.c', 'vectors/input.bin', 'vectors/expected.bin'];
  write(join(outDir, 'tapwarden_filter.h'), header({ spec, weights: initialWords, version: VERSION }));
  write(join(outDir, 'tapwarden_filter.c'), source({ spec, weights: initialWords, version: VERSION }));
  write(join(outDir, 'check.c'), checkSource(spec, vectors, handoffEvery));
  write(join(outDir, 'vectors', 'input.bin'), packColumns([vectors.x, vectors.d], spec));
  write(join(outDir, 'vectors', 'expected.bin'), packColumns([vectors.adaptive, vectors.clean], spec));
  const f32 = float32Constants(spec);
  const constants =
    fmt === null
      ? { step: f32.mu, delta: f32.delta, leakFactor: f32.c, weightLimit: f32.limit }
      : { fracBits: fmt.fracBits, stepFracBits: 16, energyFracBits: 30, ...fixedConstants(spec, fmt) };
  writeJsonAtomic(join(outDir, 'settings.json'), {
    tool: `tapwarden ${VERSION}`,
    config: opts.configFile,
    configSha256: createHash('sha256').update(JSON.stringify(config)).digest('hex'),
    format: spec.arithmetic,
    algorithm: spec.algorithm,
    taps: spec.taps,
    sampleRate: rate,
    rounding: fmt === null ? 'binary32 round to nearest even' : spec.rounding,
    constants: { ...constants, leakShift: spec.leakShift, meanRemovalEvery: spec.meanRemovalEvery },
    health: healthSettings(config, windowSamples, spec),
    weights: {
      source: reached === null ? 'zero (no recording given)' : opts.recording,
      recordingSha256: reached === null ? null : sha256(opts.recording!),
      recordingSeconds: reached?.seconds ?? null,
      handoffs: reached?.handoffs ?? 0,
      clean: initialWords,
    },
    vectors: {
      recording: vectorFile,
      samples: vectors.x.length,
      handoffEvery,
      words: fmt === null ? 'binary32, little-endian' : 'int32, little-endian',
      input: 'vectors/input.bin: x, d interleaved',
      expected: 'vectors/expected.bin: adaptive output, clean output interleaved',
      inputClips: vectors.inputClips,
      saturations: { weights: vectors.weightSaturations, signal: vectors.signalSaturations, cleanSignal: vectors.cleanSignalSaturations },
    },
  });
  return { files: files.map((f) => join(outDir, f)), vectorSamples: vectors.x.length, handoffEvery };
}
