import { butterworth, filterInPlace } from '../dsp/design.js';
import { GaussianNoise } from '../dsp/noise.js';
import { sigmaOfDb } from '../dsp/level.js';

/**
 * The demo bench: a gearbox endurance stand driven by a high-speed spindle motor. An
 * accelerometer on the motor's mount gives the reference; its charge amplifier is AC-coupled
 * with a 500 Hz high-pass (to reject the stand's rigid-body sway) and an anti-alias low-pass at
 * 3 kHz, so the reference holds nothing below ~450 Hz or above ~3.3 kHz. The measurement
 * accelerometer on the specimen hears the motor through the stand's frame (an unknown path) on
 * top of the specimen's own faint bearing signature. Part way through, a frame clamp is
 * re-torqued and the path changes; later a loose connector puts a burst of garbage on the
 * measurement channel. A second measurement accelerometer, at the specimen's output flange,
 * hears the motor through a longer path that the re-torque also changes, the bearing signature
 * more faintly, and the stand's hydraulic pump (its own reference accelerometer on the pump's
 * mount: a second source, on a second reference); its cable stays sound.
 */
export interface Scenario {
  readonly sampleRate: number;
  readonly durationSeconds: number;
  readonly pathChangeSeconds: number;
  readonly glitchSeconds: number;
  readonly glitchDurationSeconds: number;
  readonly referenceBandHz: readonly [number, number];
}

export const BENCH: Scenario = {
  sampleRate: 16000,
  durationSeconds: 40,
  pathChangeSeconds: 24,
  glitchSeconds: 31,
  glitchDurationSeconds: 0.4,
  referenceBandHz: [500, 3000],
};

export interface Recording {
  readonly reference: Float64Array;
  readonly desired: Float64Array;
  /** The second measurement channel (the output flange). */
  readonly flange: Float64Array;
  /** The second reference: the hydraulic pump's mount. */
  readonly pump: Float64Array;
  /** The signal of interest alone: what a perfect canceller would leave. */
  readonly signal: Float64Array;
}

/** A decaying resonance through the frame: delay, then a damped sinusoid. */
function framePath(taps: number, delay: number, gain: number, freqHz: number, decay: number, fs: number): Float64Array {
  const h = new Float64Array(taps);
  for (let n = delay; n < taps; n++) {
    const t = n - delay;
    h[n] = gain * decay ** t * Math.cos((2 * Math.PI * freqHz * t) / fs + 0.3);
  }
  return h;
}

function rms(x: Float64Array): number {
  let s = 0;
  for (const v of x) s += v * v;
  return Math.sqrt(s / x.length);
}

/** Generates the bench recording deterministically. */
export function generateBench(sc: Scenario = BENCH, seed = 2026): Recording {
  const fs = sc.sampleRate;
  const n = Math.round(sc.durationSeconds * fs);
  const rng = new GaussianNoise(seed);

  // Motor vibration: shaft harmonics on a slowly wandering speed, plus broadband motor noise.
  const motor = new Float64Array(n);
  rng.fill(motor, 0.3);
  let phase = 0;
  for (let i = 0; i < n; i++) {
    const shaftHz = 98.3 * (1 + 0.01 * Math.sin((2 * Math.PI * i) / (fs * 13)));
    phase += (2 * Math.PI * shaftHz) / fs;
    let v = 0;
    for (let k = 4; k <= 32; k++) v += Math.sin(k * phase + k * k * 0.7) / Math.sqrt(k);
    motor[i]! += 0.35 * v;
  }
  const [lo, hi] = sc.referenceBandHz;
  filterInPlace([...butterworth('highpass', 4, lo, fs), ...butterworth('lowpass', 8, hi, fs)], motor);
  const scale = sigmaOfDb(-20) / rms(motor);
  const reference = motor.map((v) => v * scale);

  // What reaches the specimen: the motor through the frame, before and after the re-torque.
  const h1 = framePath(40, 3, 0.9, 820, 0.9, fs);
  const h2 = framePath(40, 5, 1.1, 1150, 0.88, fs);
  const change = Math.round(sc.pathChangeSeconds * fs);
  const desired = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const h = i < change ? h1 : h2;
    let acc = 0;
    for (let k = 0; k < h.length && k <= i; k++) acc += h[k]! * reference[i - k]!;
    desired[i] = acc;
  }

  // The specimen's bearing signature: 1.1 kHz bursts at about -40 dBFS, and sensor noise.
  const signal = new Float64Array(n);
  const tone = sigmaOfDb(-37);
  for (let i = 0; i < n; i++) {
    const t = i / fs;
    const envelope = Math.max(0, Math.sin(2 * Math.PI * 0.7 * t)) ** 4;
    signal[i] = tone * envelope * Math.sin(2 * Math.PI * 1100 * t);
  }
  const sensor = new Float64Array(n);
  rng.fill(sensor, sigmaOfDb(-70));
  for (let i = 0; i < n; i++) desired[i]! += signal[i]! + sensor[i]!;

  // The connector glitch: full-scale garbage on the measurement channel.
  const g0 = Math.round(sc.glitchSeconds * fs);
  const g1 = Math.min(n, g0 + Math.round(sc.glitchDurationSeconds * fs));
  for (let i = g0; i < g1; i++) desired[i] = rng.next() > 0 ? 0.99 : -0.99 * Math.abs(rng.next());

  // The flange channel, from its own noise generator (the first channels stay as they were).
  const h3 = framePath(48, 6, 0.6, 650, 0.92, fs);
  const h4 = framePath(48, 8, 0.75, 930, 0.9, fs);
  const flangeRng = new GaussianNoise(seed + 1);
  const flange = new Float64Array(n);
  const flangeNoise = new Float64Array(n);
  flangeRng.fill(flangeNoise, sigmaOfDb(-70));
  // The pump: a 37.5 Hz piston rate's harmonics (its own AC-coupled, band-limited sensor) and flow noise.
  const pump = new Float64Array(n);
  flangeRng.fill(pump, 0.2);
  for (let i = 0; i < n; i++) {
    const t = i / fs;
    let v = 0;
    for (let k = 8; k <= 40; k += 2) v += Math.sin(2 * Math.PI * 37.5 * k * t + 0.3 * k) / k;
    pump[i]! += 0.6 * v;
  }
  filterInPlace([...butterworth('highpass', 4, 250, fs), ...butterworth('lowpass', 8, 2500, fs)], pump);
  const pumpScale = sigmaOfDb(-24) / rms(pump);
  for (let i = 0; i < n; i++) pump[i] = pump[i]! * pumpScale;
  const hp = framePath(32, 4, 0.8, 560, 0.88, fs);
  for (let i = 0; i < n; i++) {
    const h = i < change ? h3 : h4;
    let acc = 0;
    for (let k = 0; k < h.length && k <= i; k++) acc += h[k]! * reference[i - k]!;
    for (let k = 0; k < hp.length && k <= i; k++) acc += hp[k]! * pump[i - k]!;
    flange[i] = acc + 0.5 * signal[i]! + flangeNoise[i]!;
  }
  return { reference, desired, flange, pump, signal };
}
