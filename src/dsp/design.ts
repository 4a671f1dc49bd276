/**
 * Filter design (no streaming state): biquad coefficients from R. Bristow-Johnson's "Audio EQ
 * Cookbook" and Butterworth section Qs, Q_k = 1 / (2 cos((2k + 1) pi / (2N))).
 */

export interface Biquad {
  readonly b0: number;
  readonly b1: number;
  readonly b2: number;
  readonly a1: number;
  readonly a2: number;
}

export type PassType = 'lowpass' | 'highpass';

/** One cookbook low- or high-pass section (a0 normalized to 1). */
export function biquad(type: PassType, cornerHz: number, q: number, sampleRate: number): Biquad {
  const w0 = (2 * Math.PI * cornerHz) / sampleRate;
  const cos = Math.cos(w0);
  const alpha = Math.sin(w0) / (2 * q);
  const a0 = 1 + alpha;
  const b1 = type === 'lowpass' ? 1 - cos : -(1 + cos);
  const b0 = type === 'lowpass' ? b1 / 2 : -b1 / 2;
  return { b0: b0 / a0, b1: b1 / a0, b2: b0 / a0, a1: (-2 * cos) / a0, a2: (1 - alpha) / a0 };
}

/** An even-order Butterworth filter as cascaded sections. */
export function butterworth(type: PassType, order: number, cornerHz: number, sampleRate: number): Biquad[] {
  if (order % 2 !== 0 || order < 2) throw new RangeError(`butterworth order must be even and >= 2, got ${order}`);
  const sections: Biquad[] = [];
  for (let k = 0; k < order / 2; k++) {
    sections.push(biquad(type, cornerHz, 1 / (2 * Math.cos(((2 * k + 1) * Math.PI) / (2 * order))), sampleRate));
  }
  return sections;
}

/** Filters x in place through the cascade (direct form II transposed), from rest. */
export function filterInPlace(sections: readonly Biquad[], x: Float64Array): void {
  for (const s of sections) {
    let z1 = 0;
    let z2 = 0;
    for (let i = 0; i < x.length; i++) {
      const v = x[i]!;
      const y = s.b0 * v + z1;
      z1 = s.b1 * v - s.a1 * y + z2;
      z2 = s.b2 * v - s.a2 * y;
      x[i] = y;
    }
  }
}
