import { existsSync, readFileSync } from 'node:fs';
import type { CaptureCause, Config } from '../config/schema.js';
import type { EngineSettings } from '../engine/dualPath.js';
import { TapwardenError, oneLine } from '../errors.js';
import type { DecisionRecord } from './record.js';
import type { EncodedRunState } from './state.js';

/**
 * A captured episode's side file (README "Captured episodes"): beside CAPTURE.wav, CAPTURE.json
 * says why it was taken, where in the stream it starts, the configuration in effect, and each
 * measurement channel's run state at its first frame, so that `tapwarden replay CAPTURE.wav`
 * resumes every run exactly where the live one was and makes the decisions it made.
 */
export const CAPTURE_FORMAT = 'tapwarden-capture/1';

export interface CaptureCauseRecord {
  readonly cause: CaptureCause;
  /** The measurement channel it came from (null: an operator mark for every channel). */
  readonly channel: number | null;
  /** Stream sample and seconds of the cause (the window's end for a decision). */
  readonly sample: number;
  readonly streamSeconds: number;
  readonly note: string | null;
  /** The decision record behind a refused or forecast cause. */
  readonly decision: DecisionRecord | null;
}

export interface CaptureFile {
  readonly format: typeof CAPTURE_FORMAT;
  readonly tool: string;
  readonly savedAt: string;
  readonly causes: CaptureCauseRecord[];
  /** The stream sample of the WAV's first frame, and its stream time. */
  readonly startSample: number;
  readonly startSeconds: number;
  readonly frames: number;
  readonly sampleRate: number;
  /** sha256 of `config` as JSON. */
  readonly configHash: string;
  /** The configuration in effect at the first frame (live settings included). */
  readonly config: Config;
  /** Which kernels ran (a state only fits the kind it came from). */
  readonly kernels: 'fast' | 'reference';
  /** Per measurement channel, in configured order: its run's state at the first frame, and settings accepted but not yet in effect. */
  readonly runs: { channel: number; state: EncodedRunState; pendingSettings: EngineSettings | null }[];
}

/** The side file of a capture WAV: same path, .json for .wav. */
export function sideFileOf(wav: string): string {
  return wav.replace(/\.wav$/i, '') + '.json';
}

/** The capture side file beside `wav`, if there is one; throws TW_ERR_CAPTURE for a damaged one. */
export function readCaptureFor(wav: string): CaptureFile | null {
  const file = sideFileOf(wav);
  if (file === wav || !existsSync(file)) return null;
  let data: unknown;
  try {
    data = JSON.parse(readFileSync(file, 'utf8'));
  } catch (err) {
    throw new TapwardenError('TW_ERR_CAPTURE', { file, detail: `cannot be read: ${oneLine(err)}` });
  }
  const c = data as Partial<CaptureFile>;
  if (c.format !== CAPTURE_FORMAT) return null; // some other JSON beside a recording: not ours
  if (!Array.isArray(c.runs) || typeof c.startSample !== 'number' || typeof c.config !== 'object' || c.config === null) {
    throw new TapwardenError('TW_ERR_CAPTURE', { file, detail: `is not a complete ${CAPTURE_FORMAT} side file; allowed: the JSON serve wrote beside the capture` });
  }
  return c as CaptureFile;
}
