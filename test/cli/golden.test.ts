import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, it } from 'vitest';
import { expectGolden } from '../helpers/golden.js';
import { cli, tmpDir } from '../helpers/tools.js';

// Golden decision logs: replay of the demo bench recording under the embedded default and the
// two fixed-point demo configs, compared line by line with committed files (test/golden/).
// Regenerate with UPDATE_GOLDEN=1 npm test after an intended change, and read the diff.

describe('golden decision logs of the demo', () => {
  const dir = tmpDir();
  cli(['demo', '--out', dir]);
  for (const config of ['bench-trial.yaml', 'q15-drift.yaml', 'q15-leak.yaml']) {
    it(config, () => {
      const out = join(dir, config.replace('.yaml', ''));
      const r = cli(['replay', join(dir, 'bench-trial.wav'), '--config', join(dir, config), '--out', out]);
      if (r.status !== 0) throw new Error(r.stderr);
      expectGolden(`replay-${config.replace('.yaml', '')}.ndjson`, readFileSync(join(out, 'decisions.ndjson'), 'utf8'));
    });
  }
});
