/**
 * Fixed-point primitives shared by the q15 and q31 kernels.
 *
 * Every value is an exact integer held in a JavaScript number (exact up to 2^53). Products
 * that could exceed 2^53 (Q31 x Q31) are split into 16-bit halves so that no operation here
 * ever rounds silently: the only rounding is the explicit `shiftRound`, and the only clipping
 * is the explicit `saturate`.
 */

export type Rounding = 'nearest' | 'truncate';

export interface QFormat {
  readonly name: 'q15' | 'q31';
  /** Fractional bits f: a stored integer v means v / 2^f. */
  readonly fracBits: number;
  /** Smallest and largest storable integer (two's complement, fracBits + 1 bits). */
  readonly min: number;
  readonly max: number;
}

export const Q15: QFormat = { name: 'q15', fracBits: 15, min: -32768, max: 32767 };
export const Q31: QFormat = { name: 'q31', fracBits: 31, min: -2147483648, max: 2147483647 };

const TWO16 = 65536;
const TWO32 = 4294967296;

/** Clips an integer to the format's range. */
export function saturate(v: number, fmt: QFormat): number {
  return v > fmt.max ? fmt.max : v < fmt.min ? fmt.min : v;
}

/**
 * v / 2^s as an integer. `truncate` rounds toward minus infinity, as an arithmetic right shift
 * does; `nearest` rounds halves up, as ITU-T G.191 `round` does. v must be an exact integer
 * below 2^53 in magnitude.
 */
export function shiftRound(v: number, s: number, rounding: Rounding): number {
  if (s === 0) return v;
  const scale = 2 ** -s;
  return rounding === 'nearest' ? Math.floor((v + 2 ** (s - 1)) * scale) : Math.floor(v * scale);
}

/**
 * (a * b) / 2^s rounded, exact for |a|, |b| <= 2^31 and s >= 16. When the product fits in 53
 * bits it is taken directly; otherwise b is split into a signed high and an unsigned low half.
 */
export function mulShift(a: number, b: number, s: number, rounding: Rounding): number {
  const p = a * b;
  if (p < 9007199254740992 && p > -9007199254740992) return shiftRound(p, s, rounding);
  const bl = b - Math.floor(b / TWO16) * TWO16; // 0 <= bl < 2^16
  const bh = (b - bl) / TWO16;
  const half = rounding === 'nearest' ? 2 ** (s - 1) : 0;
  // a*b + half = (a*bh) * 2^16 + (a*bl + half); each part below 2^48.
  const t = a * bh + Math.floor((a * bl + half) / TWO16);
  return Math.floor(t / 2 ** (s - 16));
}

/** v * 2^f rounded to an integer, not saturated. */
export function scaleRound(v: number, f: number, rounding: Rounding): number {
  const scaled = v * 2 ** f;
  return rounding === 'nearest' ? Math.floor(scaled + 0.5) : Math.floor(scaled);
}

/** Quantizes a real value to the format with the given rounding, saturating. */
export function quantize(v: number, fmt: QFormat, rounding: Rounding): number {
  return saturate(scaleRound(v, fmt.fracBits, rounding), fmt);
}

/** Integer division num / den (den > 0) with the given rounding; exact for |num| < 2^53. */
export function divRound(num: number, den: number, rounding: Rounding): number {
  return rounding === 'nearest' ? Math.floor(num / den + 0.5) : Math.floor(num / den);
}

/**
 * An exact accumulator for sums of products of two integers of up to 32 bits, as a DSP's wide
 * accumulator would hold them. The product a*b is taken as (a*bh)*2^16 + a*bl and the limbs are
 * renormalized every 64 terms, so the sum is exact for any realistic length.
 */
export class WideAccumulator {
  private top = 0; // units of 2^48
  private mid = 0; // units of 2^16
  private low = 0; // units of 1
  private terms = 0;

  clear(): void {
    this.top = 0;
    this.mid = 0;
    this.low = 0;
    this.terms = 0;
  }

  /** Adds a*b where b has already been split as bh*2^16 + bl (0 <= bl < 2^16). */
  addSplit(a: number, bh: number, bl: number): void {
    this.mid += a * bh;
    this.low += a * bl;
    if (++this.terms === 64) this.normalize();
  }

  add(a: number, b: number): void {
    const bl = b - Math.floor(b / TWO16) * TWO16;
    this.addSplit(a, (b - bl) / TWO16, bl);
  }

  private normalize(): void {
    const c = Math.floor(this.low / TWO16);
    this.mid += c;
    this.low -= c * TWO16;
    const c2 = Math.floor(this.mid / TWO32);
    this.top += c2;
    this.mid -= c2 * TWO32;
    this.terms = 0;
  }

  /** The sum divided by 2^s (16 <= s <= 48) with rounding; the caller saturates. */
  result(s: number, rounding: Rounding): number {
    if (rounding === 'nearest') this.low += 2 ** (s - 1);
    this.normalize();
    // value = top*2^48 + mid*2^16 + low with 0 <= mid < 2^32 and 0 <= low < 2^16, so
    // floor(value / 2^s) = top*2^(48-s) + floor(mid / 2^(s-16)).
    return this.top * 2 ** (48 - s) + Math.floor(this.mid / 2 ** (s - 16));
  }
}
