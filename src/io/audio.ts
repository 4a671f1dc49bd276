import { createRequire } from 'node:module';
import type * as Naudiodon from 'naudiodon';
import { TapwardenError, oneLine } from '../errors.js';

/**
 * Sound devices through PortAudio (the naudiodon native addon). The addon is loaded on first use
 * so that replay and analysis work where it could not be built.
 */

export type DeviceInfo = Naudiodon.DeviceInfo;
type Module = typeof Naudiodon;

let loaded: Module | null = null;

export function audio(): Module {
  if (loaded === null) {
    try {
      loaded = createRequire(import.meta.url)('naudiodon') as Module;
    } catch (err) {
      throw new TapwardenError('TW_ERR_AUDIO_UNAVAILABLE', {
        reason: `the naudiodon addon did not load (${oneLine(err)}); reinstall with npm ci and check that package.json's allowScripts approves naudiodon`,
      });
    }
  }
  return loaded;
}

export function listDevices(): DeviceInfo[] {
  return audio().getDevices();
}

/**
 * The device a config names: an index, an exact name, or null for the host's default (-1).
 * Throws TW_ERR_AUDIO_DEVICE listing what exists.
 */
export function resolveDevice(ref: string | number | null, direction: 'input' | 'output', channels: number): number {
  if (ref === null) return -1;
  const devices = listDevices();
  const usable = devices.filter((d) => (direction === 'input' ? d.maxInputChannels : d.maxOutputChannels) >= channels);
  const found = typeof ref === 'number' ? devices.find((d) => d.id === ref) : devices.find((d) => d.name === ref);
  if (found === undefined || !usable.includes(found)) {
    const names = usable.map((d) => `${d.id}:${JSON.stringify(d.name)}`).join(', ') || 'none';
    const why = found === undefined ? 'not found' : `has fewer than ${channels} ${direction} channel(s)`;
    throw new TapwardenError('TW_ERR_AUDIO_DEVICE', { device: JSON.stringify(ref), reason: `${why}; ${direction} devices with ${channels} channel(s): ${names}` });
  }
  return found.id;
}

export interface Capture {
  stop(): void;
}

/** Opens a 16-bit interleaved capture stream; data and errors arrive through the callbacks. */
export function openCapture(opts: {
  deviceId: number;
  channels: number;
  sampleRate: number;
  framesPerBuffer: number;
  onData: (interleaved: Buffer) => void;
  onError: (message: string) => void;
}): Capture {
  const pa = audio();
  const io = pa.AudioIO({
    inOptions: {
      deviceId: opts.deviceId,
      channelCount: opts.channels,
      sampleFormat: pa.SampleFormat16Bit,
      sampleRate: opts.sampleRate,
      framesPerBuffer: opts.framesPerBuffer,
      maxQueue: 16,
      closeOnError: false,
    },
  });
  io.on('data', opts.onData);
  io.on('error', (err: Error) => opts.onError(oneLine(err)));
  io.on('end', () => opts.onError('the capture stream ended'));
  io.start();
  return { stop: () => quit(io) };
}

/**
 * Stops a stream. naudiodon 2.3.6's abort() throws ("Quit expects 1 argument"), so this uses
 * quit(), which lets the native side finish the buffer in hand; errors after stop are dropped.
 */
function quit(io: NodeJS.EventEmitter & { quit(cb?: () => void): void }): void {
  io.removeAllListeners('data');
  io.removeAllListeners('error');
  io.removeAllListeners('end');
  io.on('error', () => {});
  try {
    Promise.resolve(io.quit()).catch(() => {});
  } catch {
    // already closed
  }
}

export interface Playback {
  /** Bytes written but not yet taken by the device. */
  readonly queuedBytes: number;
  write(interleaved: Buffer): void;
  stop(): void;
}

/** Opens a 16-bit mono playback stream. */
export function openPlayback(opts: { deviceId: number; sampleRate: number; onError: (message: string) => void }): Playback {
  const pa = audio();
  const io = pa.AudioIO({
    outOptions: { deviceId: opts.deviceId, channelCount: 1, sampleFormat: pa.SampleFormat16Bit, sampleRate: opts.sampleRate, closeOnError: false },
  });
  io.on('error', (err: Error) => opts.onError(oneLine(err)));
  io.start();
  return {
    get queuedBytes() {
      return (io as unknown as { writableLength: number }).writableLength;
    },
    write(b) {
      io.write(b);
    },
    stop: () => quit(io),
  };
}
