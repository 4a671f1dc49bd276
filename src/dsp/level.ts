/** Power and level conversions. Powers are mean squares of full-scale-normalized samples. */

/**
 * The accepted input range: samples are full-scale-normalized (1.0 = full scale), and a finite
 * sample beyond +-INPUT_LIMIT (+60 dB re full scale) is clamped to it and counted, as non-finite
 * samples are replaced by 0 and counted. With weights bounded by filter.weightLimit this keeps
 * every product, sum and power finite in float64 and float32.
 */
export const INPUT_LIMIT = 1000;

/** The floor below which a power reads as this many dB: keeps JSON and metrics finite. */
export const POWER_FLOOR_DB = -200;

/** 10 log10(p), floored at POWER_FLOOR_DB. */
export function powerDb(p: number): number {
  return p > 1e-20 ? 10 * Math.log10(p) : POWER_FLOOR_DB;
}

/** Cancellation 10 log10(Pd / Pe) in dB. */
export function cancellationDb(desiredPower: number, errorPower: number): number {
  return powerDb(desiredPower) - powerDb(errorPower);
}

/** A power (dB relative to a full-scale square wave, i.e. to 1.0) as a standard deviation. */
export function sigmaOfDb(db: number): number {
  return Math.sqrt(10 ** (db / 10));
}
