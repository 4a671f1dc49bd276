/**
 * A sound device in a child process of its own. PortAudio (through naudiodon) prints status
 * lines from native code on the process's stdout and can block inside a driver; in a child whose
 * stdout is the parent's stderr, neither reaches the service's JSON log or its threads, and a
 * stuck device is stopped by killing the child.
 *
 *   node audioChild.js capture '{"device":..., "channels":2, "sampleRate":48000, "framesPerBuffer":256, "maxQueueBytes":...}'
 *     16-bit interleaved frames go out on fd 4; {"t":"up"} / {"t":"error","message"} /
 *     {"t":"overrun","bytes"} on the IPC channel (fd 3).
 *   node audioChild.js playback '{"device":..., "sampleRate":48000, "maxQueueBytes":...}'
 *     16-bit mono frames come in on stdin; {"t":"underrun"} / {"t":"dropped","blocks":N} / {"t":"error"} on IPC.
 */
import { createReadStream, createWriteStream } from 'node:fs';
import { oneLine } from '../errors.js';
import { openCapture, openPlayback, resolveDevice } from './audio.js';

interface CaptureOptions {
  device: string | number | null;
  channels: number;
  sampleRate: number;
  framesPerBuffer: number;
  /** Bytes the parent may fall behind by before captured data is dropped. */
  maxQueueBytes: number;
}

interface PlaybackOptions {
  device: string | number | null;
  sampleRate: number;
  maxQueueBytes: number;
  /** Bytes of one block the parent writes (a read may hold several: the pipe joins them). */
  blockBytes: number;
}

const send = (m: object): void => {
  process.send?.(m);
};

function fail(message: string): void {
  send({ t: 'error', message });
  // Let the IPC message out before exiting.
  setTimeout(() => process.exit(1), 50);
}

function capture(o: CaptureOptions): void {
  const out = createWriteStream('', { fd: 4 });
  out.on('error', () => process.exit(0)); // the parent went away
  const deviceId = resolveDevice(o.device, 'input', o.channels);
  let up = false;
  openCapture({
    deviceId,
    channels: o.channels,
    sampleRate: o.sampleRate,
    framesPerBuffer: o.framesPerBuffer,
    onData: (b) => {
      if (!up) {
        up = true;
        send({ t: 'up' });
      }
      if (out.writableLength + b.length > o.maxQueueBytes) send({ t: 'overrun', bytes: b.length });
      else out.write(b);
    },
    onError: (m) => fail(m),
  });
}

function playback(o: PlaybackOptions): void {
  const deviceId = resolveDevice(o.device, 'output', 1);
  const stream = openPlayback({ deviceId, sampleRate: o.sampleRate, onError: (m) => fail(m) });
  let blocks = 0;
  createReadStream('', { fd: 0 }).on('data', (chunk) => {
    const b = chunk as Buffer;
    // The device drained everything queued before this block came: an underrun.
    if (blocks > 4 && stream.queuedBytes === 0) send({ t: 'underrun' });
    if (stream.queuedBytes + b.length > o.maxQueueBytes) send({ t: 'dropped', blocks: Math.max(1, Math.round(b.length / o.blockBytes)) });
    else stream.write(b);
    blocks++;
  }).on('end', () => process.exit(0));
}

process.on('disconnect', () => process.exit(0));
const [mode, json] = process.argv.slice(2);
try {
  const options = JSON.parse(json ?? '{}');
  if (mode === 'capture') capture(options as CaptureOptions);
  else if (mode === 'playback') playback(options as PlaybackOptions);
  else fail(`unknown mode ${mode}`);
} catch (err) {
  fail(oneLine(err));
}
