import { FdafAdaptiveKernel, FdafFirKernel } from './fdaf.js';
import { FixedAdaptiveKernel, FixedFirKernel, formatOf } from './fixedKernel.js';
import { Float32AdaptiveKernel, Float32FirKernel } from './float32Kernel.js';
import { FloatAdaptiveKernel, FloatFirKernel } from './floatKernel.js';
import type { AdaptiveKernel, AdaptiveSpec, FirKernel } from './types.js';
import { WasmAdaptiveKernel, WasmFirKernel, hasFastKernel } from './wasm/fastKernels.js';

/**
 * Which implementation runs: the fast WebAssembly kernels where they exist (float64, q15, q31)
 * and the reference kernels otherwise (float32; several references: fixedKernel.ts for q15 and
 * q31, floatKernel.ts for float64), or the reference everywhere when asked (TAPWARDEN_KERNELS=reference), e.g. to cross-check a result.
 */
export type KernelChoice = 'fast' | 'reference';

function useFast(spec: AdaptiveSpec, choice: KernelChoice | undefined): boolean {
  const wanted = choice ?? (process.env['TAPWARDEN_KERNELS'] === 'reference' ? 'reference' : 'fast');
  return wanted === 'fast' && !multi(spec) && hasFastKernel(spec);
}

/** Several references: the reference kernels (fixedKernel.ts, floatKernel.ts) take them. */
const multi = (spec: AdaptiveSpec) => (spec.references ?? 1) > 1;

const isFixed = (spec: AdaptiveSpec) => formatOf(spec.arithmetic) !== null;

const fdafOptions = (spec: AdaptiveSpec) => ({ blockSize: spec.blockSize ?? 256, constrained: spec.constrained ?? true });

/** The adaptive kernel for the spec's algorithm and arithmetic. */
export function createAdaptiveKernel(spec: AdaptiveSpec, choice?: KernelChoice): AdaptiveKernel {
  if (spec.algorithm === 'pbfdaf') return new FdafAdaptiveKernel(spec, fdafOptions(spec));
  if (useFast(spec, choice)) return new WasmAdaptiveKernel(spec);
  if (isFixed(spec)) return new FixedAdaptiveKernel(spec);
  return spec.arithmetic === 'float32' ? new Float32AdaptiveKernel(spec) : new FloatAdaptiveKernel(spec);
}

/**
 * The fixed-weight filter for the clean path, in the same arithmetic. `partner`, the adaptive
 * kernel fed the same reference, lets a frequency-domain clean path reuse its input transforms.
 */
export function createFirKernel(spec: AdaptiveSpec, choice?: KernelChoice, partner?: AdaptiveKernel): FirKernel {
  if (spec.algorithm === 'pbfdaf') {
    return new FdafFirKernel(spec, fdafOptions(spec), partner instanceof FdafAdaptiveKernel ? partner : undefined);
  }
  if (useFast(spec, choice)) return new WasmFirKernel(spec);
  if (isFixed(spec)) return new FixedFirKernel(spec);
  return spec.arithmetic === 'float32' ? new Float32FirKernel(spec) : new FloatFirKernel(spec);
}

/** The largest |w| the arithmetic can store. */
export function weightLimitOf(spec: AdaptiveSpec): number {
  if (spec.arithmetic === 'q15') return 1 - 2 ** -15;
  if (spec.arithmetic === 'q31') return 1 - 2 ** -31;
  return spec.weightLimit;
}
