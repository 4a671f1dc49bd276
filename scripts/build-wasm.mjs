#!/usr/bin/env node
// Compiles the hand-written WebAssembly text in src/dsp/wasm/*.wat to dist/wasm/*.wasm with
// wabt (pinned in package.json), so the binary is reproducible from the source in the repo.
import { mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import wabt from 'wabt';

const root = new URL('..', import.meta.url).pathname;
const srcDir = join(root, 'src/dsp/wasm');
const outDir = join(root, 'dist/wasm');
mkdirSync(outDir, { recursive: true });
const w = await wabt();
for (const f of readdirSync(srcDir).filter((n) => n.endsWith('.wat'))) {
  const mod = w.parseWat(f, readFileSync(join(srcDir, f), 'utf8'), { simd: true });
  mod.validate();
  const { buffer } = mod.toBinary({ log: false, write_debug_names: true });
  writeFileSync(join(outDir, f.replace(/\.wat$/, '.wasm')), buffer);
  mod.destroy();
}
