import { spawnSync } from 'node:child_process';
import { createReadStream, statSync } from 'node:fs';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { GaussianNoise } from '../../src/dsp/noise.js';
import { CLI, tmpDir } from '../helpers/tools.js';

// Replay memory does not grow with the recording (README "summary.json"): the summary keeps
// fixed-size histograms, a decimated series and the first and last events; the decision log is
// written as the replay goes. Measured as the peak resident set the process reports itself
// (process.resourceUsage().maxRSS, a count of bytes, not a time), and as a JavaScript heap capped
// at 24 MB that the long replay must fit (before the run layer it peaked at 570 MB). The resident
// set also holds code, WebAssembly memory and V8's heap slack, which varies with GC timing on a
// busy machine, so the ratio allows 1.5x; memory that grew with the recording would be ~5x.
// 0.05 s windows at 1 kHz make a 2 h recording 144,000 windows in a 29 MB file.

function write(file: string, seconds: number, rate: number): void {
  const w = new WavWriter(file, rate, 2, 'pcm16');
  const g = new GaussianNoise(3);
  const B = 65536;
  const x = new Float64Array(B);
  const d = new Float64Array(B);
  for (let done = 0; done < seconds * rate; done += B) {
    const n = Math.min(B, seconds * rate - done);
    g.fill(x, 0.1, 0, n);
    for (let i = 0; i < n; i++) d[i] = 0.5 * x[i]! + 0.3 * (i ? x[i - 1]! : 0);
    w.write([x, d], n);
  }
  w.close();
}

function peakMegabytes(recording: string, config: string, out: string, heapMegabytes?: number): number {
  const report = 'data:text/javascript,process.on("exit",()=>process.stderr.write("maxRSS "+process.resourceUsage().maxRSS+"\\n"))';
  const r = spawnSync(process.execPath, [...(heapMegabytes ? [`--max-old-space-size=${heapMegabytes}`] : []), '--import', report, CLI, 'replay', recording, '--config', config, '--out', out], { encoding: 'utf8' });
  expect(r.status, r.stderr).toBe(0);
  return Number(/maxRSS (\d+)/.exec(r.stderr)![1]) / 1024;
}

async function lines(file: string): Promise<number> {
  let n = 0;
  for await (const _ of createInterface({ input: createReadStream(file) })) n++;
  return n;
}

describe('replay memory is bounded', () => {
  it('a 2 h recording with 0.05 s windows fits a 24 MB heap and peaks within 1.5x the memory of a 6 min one', async () => {
    const dir = tmpDir();
    const rate = 1000;
    write(join(dir, 'short.wav'), 360, rate);
    write(join(dir, 'long.wav'), 7200, rate);
    const config = join(dir, 'w.yaml');
    (await import('node:fs')).writeFileSync(config, 'filter:\n  taps: 16\nsupervisor:\n  windowSeconds: 0.05\n  crossfadeSeconds: 0.01\n');
    const short = peakMegabytes(join(dir, 'short.wav'), config, join(dir, 'short'));
    const long = peakMegabytes(join(dir, 'long.wav'), config, join(dir, 'long'), 24);
    expect(long / short).toBeLessThanOrEqual(1.5);
    // The full record is in the log; the summary stays small.
    expect(await lines(join(dir, 'long', 'decisions.ndjson'))).toBeGreaterThanOrEqual(144_000);
    expect(statSync(join(dir, 'long', 'summary.json')).size).toBeLessThan(8 * 1024 * 1024);
  });
});
