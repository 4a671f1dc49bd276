import { mkdirSync, statSync } from 'node:fs';
import { dirname } from 'node:path';
import { TapwardenError, oneLine } from '../errors.js';

/**
 * Creates a directory and its missing parents; throws TW_ERR_OUTPUT_WRITE naming the path.
 * By hand because Node 20's mkdirSync(..., { recursive: true }) never returns for a path under
 * a filesystem that refuses new entries with ENOENT (/proc/x).
 */
export function makeDirectory(dir: string): void {
  try {
    mkdirSync(dir);
  } catch (err) {
    const code = (err as NodeJS.ErrnoException).code;
    if (code === 'EEXIST') {
      if (statSync(dir).isDirectory()) return;
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: dir, reason: 'it exists and is not a directory' });
    }
    const parent = dirname(dir);
    if (code !== 'ENOENT' || parent === dir || exists(parent)) throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: dir, reason: oneLine(err) });
    makeDirectory(parent);
    try {
      mkdirSync(dir);
    } catch (again) {
      if ((again as NodeJS.ErrnoException).code !== 'EEXIST') throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: dir, reason: oneLine(again) });
    }
  }
}

function exists(path: string): boolean {
  try {
    statSync(path);
    return true;
  } catch {
    return false;
  }
}
