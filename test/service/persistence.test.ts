import { spawn } from 'node:child_process';
import { createInterface } from 'node:readline';
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterEach, describe, expect, it } from 'vitest';
import { readSnapshot } from '../../src/service/persistence.js';
import { serveWith, stopAll, until } from '../helpers/serve.js';
import { tmpDir } from '../helpers/tools.js';

describe('weight persistence', () => {
  afterEach(stopAll);

  it('a restart restores the clean weights saved at shutdown', async () => {
    const dir = tmpDir();
    const file = join(dir, 'weights.json');
    const s1 = await serveWith(dir, `persistence:\n  file: ${file}\n  minIntervalSeconds: 0\n`);
    await until(async () => (await s1.metric('tapwarden_clean_weights_version{channel="1"}')) >= 2, 20_000, 'two handoffs');
    expect(await s1.stop()).toBe(0);
    const saved = readSnapshot(file);
    if ('problem' in saved) throw new Error(saved.problem);
    expect(saved.snapshot.taps).toBe(64);
    expect(saved.snapshot.weights.some((w) => w !== 0)).toBe(true);

    // No handoffs in the second run: the clean path must hold exactly what was saved.
    const s2 = await serveWith(dir, `persistence:\n  file: ${file}\n  minIntervalSeconds: 0\nsupervisor:\n  passesRequired: 100000\n`);
    try {
      expect(s2.logs.some((l) => String(l['msg']).startsWith(`weights restored from ${file}`))).toBe(true);
      const w = (await (await s2.get('/api/weights?path=clean')).json()) as { weights: number[] };
      expect(w.weights).toEqual(saved.snapshot.weights);
    } finally {
      await s2.stop();
    }
  });

  it('an incompatible snapshot is not restored, with one clear log line saying why', async () => {
    const dir = tmpDir();
    const file = join(dir, 'weights.json');
    const s1 = await serveWith(dir, `persistence:\n  file: ${file}\n  minIntervalSeconds: 0\nfilter:\n  taps: 32\n`);
    await until(() => existsSync(file), 20_000, 'a snapshot');
    await s1.stop();
    const s2 = await serveWith(dir, `persistence:\n  file: ${file}\n`);
    try {
      const lines = s2.logs.filter((l) => String(l['msg']).startsWith('weights not restored'));
      expect(lines.map((l) => l['msg'])).toEqual(['weights not restored: the snapshot was taken with taps 32 vs 64']);
    } finally {
      await s2.stop();
    }
    writeFileSync(file, '{"format": "tapwarden-weights/1", "weights": [1, 2], "sha256": "00"}');
    const s3 = await serveWith(dir, `persistence:\n  file: ${file}\n`);
    try {
      expect(s3.logs.some((l) => /weights not restored: .* fails its checksum/.test(String(l['msg'])))).toBe(true);
    } finally {
      await s3.stop();
    }
  });

  it('a process killed (SIGKILL) while writing snapshots never leaves a corrupt one', async () => {
    const dir = tmpDir();
    const file = join(dir, 'weights.json');
    const module = new URL('../../dist/service/persistence.js', import.meta.url).href;
    // A writer that saves 4096-tap snapshots back to back, each with different weights, and says
    // which version it is about to write. The kill lands after a different number of them each
    // round (counted, not timed), somewhere inside the next write.
    const script = `
      const { makeSnapshot, writeSnapshot } = await import(${JSON.stringify(module)});
      const settings = { sampleRate: 48000, filter: { taps: 4096, algorithm: 'nlms', arithmetic: 'float64' } };
      for (let v = 1; ; v++) {
        const w = Array.from({ length: 4096 }, (_, k) => Math.sin(v * 0.001 + k) / (k + 1));
        process.stdout.write(v + '\\n');
        writeSnapshot(${JSON.stringify(file)}, makeSnapshot(settings, w, v));
      }`;
    const versions = new Set<number>();
    for (let round = 0; round < 25; round++) {
      const child = spawn(process.execPath, ['--input-type=module', '-e', script], { stdio: ['ignore', 'pipe', 'inherit'] });
      const killAfter = 2 + (round % 8);
      try {
        await new Promise<void>((resolve) => {
          let seen = 0;
          createInterface({ input: child.stdout! }).on('line', () => {
            if (++seen === killAfter) {
              child.kill('SIGKILL');
              resolve();
            }
          });
        });
        await new Promise((r) => child.once('exit', r));
      } finally {
        child.kill('SIGKILL');
      }
      const read = readSnapshot(file);
      if ('problem' in read) throw new Error(`round ${round}: ${read.problem}`);
      expect(read.snapshot.weights).toHaveLength(4096);
      // Everything written before the version last announced was complete (the writer may have
      // got further than we read before the kill arrived).
      expect(read.snapshot.cleanVersion).toBeGreaterThanOrEqual(killAfter - 1);
      versions.add(read.snapshot.cleanVersion);
    }
    // The kills landed after different numbers of writes.
    expect(versions.size).toBeGreaterThan(3);
    expect(JSON.parse(readFileSync(file, 'utf8')).format).toBe('tapwarden-weights/1');
  });
});
