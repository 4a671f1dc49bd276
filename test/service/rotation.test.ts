import { readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadConfig } from '../../src/config/load.js';
import { CaptureWriter } from '../../src/service/captureWriter.js';
import { tmpDir } from '../helpers/tools.js';

// Captured episodes are removed oldest first (by the wall time in their names) while there are
// more than capture.maxFiles or more than capture.maxBytes in all; the newest always stays.

function episodes(dir: string, sizes: number[]): void {
  sizes.forEach((size, i) => {
    const name = `capture-20261203T0700${String(i).padStart(2, '0')}.000Z-mark-ch1`;
    writeFileSync(join(dir, `${name}.wav`), Buffer.alloc(size));
    writeFileSync(join(dir, `${name}.json`), '{}');
  });
  writeFileSync(join(dir, 'notes.txt'), 'not an episode: left alone');
}

const writer = (dir: string, maxFiles: number, maxBytes: number) =>
  new CaptureWriter(loadConfig(undefined, { capture: { dir, maxFiles, maxBytes } }), 16000, 'fast');

describe('capture rotation', () => {
  it('keeps at most maxFiles, removing the oldest with their side files', () => {
    const dir = tmpDir();
    episodes(dir, [10, 10, 10, 10, 10]);
    writer(dir, 2, 1 << 30).rotate();
    expect(readdirSync(dir).sort()).toEqual(['capture-20261203T070003.000Z-mark-ch1.json', 'capture-20261203T070003.000Z-mark-ch1.wav', 'capture-20261203T070004.000Z-mark-ch1.json', 'capture-20261203T070004.000Z-mark-ch1.wav', 'notes.txt']);
  });

  it('keeps at most maxBytes in all, and the newest even when it alone is larger', () => {
    const dir = tmpDir();
    const MiB = 1 << 20;
    episodes(dir, [MiB, MiB, MiB]);
    writer(dir, 100, 2 * MiB + 100).rotate(); // two episodes and their side files fit
    expect(readdirSync(dir).filter((f) => f.endsWith('.wav'))).toEqual(['capture-20261203T070001.000Z-mark-ch1.wav', 'capture-20261203T070002.000Z-mark-ch1.wav']);
    const big = tmpDir();
    episodes(big, [MiB, 3 * MiB]);
    writer(big, 100, MiB).rotate();
    expect(readdirSync(big).filter((f) => f.endsWith('.wav'))).toEqual(['capture-20261203T070001.000Z-mark-ch1.wav']);
  });
});
