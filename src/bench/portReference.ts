import { execFileSync, spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { existsSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { loadConfig } from '../config/load.js';
import { formatOf } from '../dsp/fixedKernel.js';
import type { AdaptiveSpec } from '../dsp/types.js';
import { header, source } from '../freeze/cport.js';
import { packColumns, portOutputs, toFormat } from '../freeze/freeze.js';
import { makeDirectory } from '../io/files.js';
import { VERSION } from '../version.js';
import type { BenchCase } from './engine.js';
import { synthetic } from './engine.js';
import type { ReferenceResult } from './references.js';

/**
 * The C reference for q15, q31 and float32: the C99 port `tapwarden freeze` generates (the
 * exact operator sequence, DEVELOPERS.md) driven per sample through both paths, built with
 * -O3 -march=native (and -ffp-contract=off for float32; never -ffast-math, which would change
 * the arithmetic). Before it is timed it must reproduce tapwarden's kernels bit for bit on the
 * bench's own input (one second, a handoff every 0.5 s); otherwise the row says why it has no
 * figure.
 */

export const PORT_FLAGS = ['-O3', '-march=native'];
const CHECK_SECONDS = 1;

const MAIN = (checkSamples: number, handoffEvery: number) => `
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include "tapwarden_filter.h"

static tw_filter_state st;

static long words(const char *path, uint32_t **out)
{
  FILE *f = fopen(path, "rb");
  long n;
  if (f == NULL) return -1;
  fseek(f, 0, SEEK_END);
  n = ftell(f) / 4;
  fseek(f, 0, SEEK_SET);
  *out = malloc((size_t)n * 4);
  if (fread(*out, 4, (size_t)n, f) != (size_t)n) return -1;
  fclose(f);
  return n;
}

static tw_sample as_sample(uint32_t u) { tw_sample v; memcpy(&v, &u, 4); return v; }
static uint32_t as_bits(tw_sample v) { uint32_t u; memcpy(&u, &v, 4); return u; }

int main(int argc, char **argv)
{
  uint32_t *in, *ex;
  long n = words(argv[1], &in) / 2, m = words(argv[2], &ex) / 2, i, total, done = 0;
  double seconds = atof(argv[3]), rate = atof(argv[4]), t;
  struct timespec a, b;
  volatile uint32_t sink = 0;
  if (n < ${checkSamples} || m < ${checkSamples}) { fprintf(stderr, "short vectors\\n"); return 2; }
  tw_filter_init(&st);
  for (i = 0; i < ${checkSamples}; i++) {
    tw_sample x = as_sample(in[2 * i]), d = as_sample(in[2 * i + 1]);
    if (as_bits(tw_filter_step(&st, x, d)) != ex[2 * i] || as_bits(tw_filter_clean(&st, x, d)) != ex[2 * i + 1]) {
      printf("{\\"mismatch\\": %ld}\\n", i);
      return 3;
    }
    if ((i + 1) % ${handoffEvery} == 0) tw_filter_handoff(&st);
  }
  total = (long)(seconds * rate);
  tw_filter_init(&st);
  clock_gettime(CLOCK_MONOTONIC, &a);
  for (i = 0; done < total; done++, i = (i + 1) % n) {
    tw_sample x = as_sample(in[2 * i]), d = as_sample(in[2 * i + 1]);
    sink ^= as_bits(tw_filter_step(&st, x, d)) ^ as_bits(tw_filter_clean(&st, x, d));
    if ((done + 1) % ${handoffEvery} == 0) tw_filter_handoff(&st);
  }
  clock_gettime(CLOCK_MONOTONIC, &b);
  t = (double)(b.tv_sec - a.tv_sec) + 1e-9 * (double)(b.tv_nsec - a.tv_nsec);
  printf("{\\"samplesPerSecond\\": %.1f, \\"realtimeFactor\\": %.3f, \\"sink\\": %u}\\n", (double)total / t, (double)total / t / rate, (unsigned)sink);
  return 0;
}
`;

/** The bench case's spec, as the engine bench runs it (the embedded default with the case's filter). */
function specOf(c: BenchCase): AdaptiveSpec {
  return loadConfig(undefined, { filter: { algorithm: c.algorithm, taps: c.taps, arithmetic: c.arithmetic, step: c.algorithm === 'lms' ? 0.01 : 0.5 } }).filter;
}

/** Builds, checks and times the port for a q15, q31 or float32 LMS/NLMS case. */
export function runPortReference(c: BenchCase): ReferenceResult | { skipped: string } {
  const cc = ['cc', 'gcc', 'clang'].find((x) => spawnSync(x, ['--version']).status === 0);
  if (cc === undefined) return { skipped: 'no C compiler' };
  const spec = specOf(c);
  const float = formatOf(spec.arithmetic) === null;
  const n = Math.round(CHECK_SECONDS * c.rate);
  const handoffEvery = Math.round(c.rate / 2);
  const raw = synthetic(n, c.taps);
  const fmt = formatOf(spec.arithmetic);
  const scale = fmt === null ? 1 : 2 ** -fmt.fracBits;
  const x = Float64Array.from(raw.x, (v) => toFormat(v, spec) * scale);
  const d = Float64Array.from(raw.d, (v) => toFormat(v, spec) * scale);
  const { ea, ec } = portOutputs(spec, x, d, new Float64Array(spec.taps), handoffEvery);
  const files = {
    h: header({ spec, weights: new Float64Array(spec.taps), version: VERSION }),
    c: source({ spec, weights: new Float64Array(spec.taps), version: VERSION }),
    main: MAIN(n, handoffEvery),
  };
  const flags = [...PORT_FLAGS, ...(float ? ['-ffp-contract=off'] : [])];
  const key = createHash('sha256').update(JSON.stringify(files)).update(flags.join(' ')).digest('hex').slice(0, 12);
  const dir = join(tmpdir(), 'tapwarden-bench', `port-${key}`);
  makeDirectory(dir);
  const binary = join(dir, 'bench');
  if (!existsSync(binary)) {
    writeFileSync(join(dir, 'tapwarden_filter.h'), files.h);
    writeFileSync(join(dir, 'tapwarden_filter.c'), files.c);
    writeFileSync(join(dir, 'main.c'), files.main);
    try {
      execFileSync(cc, [...flags, '-o', binary, join(dir, 'main.c'), join(dir, 'tapwarden_filter.c')], { stdio: 'pipe' });
    } catch (err) {
      return { skipped: `${cc} ${flags.join(' ')} failed: ${String((err as { stderr?: Buffer }).stderr ?? err).split('\n')[0]}` };
    }
  }
  writeFileSync(join(dir, 'input.bin'), packColumns([x, d], spec));
  writeFileSync(join(dir, 'expected.bin'), packColumns([ea, ec], spec));
  const r = spawnSync(binary, [join(dir, 'input.bin'), join(dir, 'expected.bin'), String(c.seconds), String(c.rate)], { encoding: 'utf8', timeout: 600_000 });
  const last = r.stdout.trim().split('\n').at(-1) ?? '';
  if (r.status === 3) return { skipped: `the C port differs from tapwarden at sample ${JSON.parse(last).mismatch}: not timed` };
  if (r.status !== 0) return { skipped: `the C port failed (${r.stderr.trim() || `exit ${r.status}`})` };
  const j = JSON.parse(last) as ReferenceResult;
  return { samplesPerSecond: j.samplesPerSecond, realtimeFactor: j.realtimeFactor };
}
