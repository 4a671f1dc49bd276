import { FixedAdaptiveKernel, FixedFirKernel } from './fixedKernel.js';
import { FloatAdaptiveKernel, FloatFirKernel } from './floatKernel.js';
import type { AdaptiveKernel, AdaptiveSpec, FirKernel } from './types.js';

/** The adaptive kernel for the spec's arithmetic. */
export function createAdaptiveKernel(spec: AdaptiveSpec): AdaptiveKernel {
  return spec.arithmetic === 'q15' || spec.arithmetic === 'q31'
    ? new FixedAdaptiveKernel(spec)
    : new FloatAdaptiveKernel(spec);
}

/** The fixed-weight filter for the clean path, in the same arithmetic. */
export function createFirKernel(spec: AdaptiveSpec): FirKernel {
  return spec.arithmetic === 'q15' || spec.arithmetic === 'q31' ? new FixedFirKernel(spec) : new FloatFirKernel(spec);
}

/** The largest |w| the arithmetic can store. */
export function weightLimitOf(spec: AdaptiveSpec): number {
  if (spec.arithmetic === 'q15') return 1 - 2 ** -15;
  if (spec.arithmetic === 'q31') return 1 - 2 ** -31;
  return spec.weightLimit;
}
