import { describe, expect, it } from 'vitest';
import { GaussianNoise } from '../../src/dsp/noise.js';
import { Q15, Q31, WideAccumulator, mulShift, saturate, shiftRound } from '../../src/dsp/fixed.js';

// The ITU-T G.191 Software Tool Library basic operators, restated with tapwarden's primitives:
// add(a,b) = saturate(a+b), mult(a,b) = saturate(floor(a*b / 2^15)),
// L_mult(a,b) = saturate32(2*a*b), round(L) = saturate(floor((L + 2^15) / 2^16)).
const add = (a: number, b: number) => saturate(a + b, Q15);
const sub = (a: number, b: number) => saturate(a - b, Q15);
const mult = (a: number, b: number) => saturate(shiftRound(a * b, 15, 'truncate'), Q15);
const L_mult = (a: number, b: number) => saturate(2 * a * b, Q31);
const round = (L: number) => saturate(shiftRound(L, 16, 'nearest'), Q15);

describe('fixed-point primitives against the ITU-T G.191 basic-operator facts (docs/REFERENCES.md, "Fixed point")', () => {
  it('add and sub saturate to [-32768, 32767] (G.191 add, sub)', () => {
    expect(add(32767, 1)).toBe(32767);
    expect(add(-32768, -1)).toBe(-32768);
    expect(sub(-32768, 1)).toBe(-32768);
    expect(sub(32767, -1)).toBe(32767);
    expect(add(1000, -3000)).toBe(-2000);
  });

  it('mult(-32768, -32768) = 32767 and mult is (a*b) >> 15 (G.191 mult)', () => {
    expect(mult(-32768, -32768)).toBe(32767);
    expect(mult(16384, 16384)).toBe(8192);
    expect(mult(-1, 1)).toBe(-1); // >> rounds toward minus infinity
  });

  it('L_mult(-32768, -32768) = 2147483647 (G.191 L_mult)', () => {
    expect(L_mult(-32768, -32768)).toBe(2147483647);
    expect(L_mult(16384, 16384)).toBe(536870912);
  });

  it('round(L) = (L + 32768) >> 16 saturated (G.191 round)', () => {
    expect(round(0x7fff8000)).toBe(32767);
    expect(round(0x00018000)).toBe(2);
    expect(round(0x00017fff)).toBe(1);
    expect(round(-0x00018000)).toBe(-1); // -98304 + 32768 = -65536 -> -1
  });

  it('Q15 and Q31 ranges and LSBs (docs/REFERENCES.md, derived)', () => {
    expect(Q15.max * 2 ** -15).toBe(1 - 2 ** -15);
    expect(2 ** -15).toBeCloseTo(3.0517578125e-5, 15);
    expect(2 ** -31).toBeCloseTo(4.656612873e-10, 18);
    expect(Q31.min).toBe(-(2 ** 31));
  });

  it('truncate rounds toward minus infinity exactly as the ECMAScript >> operator (ECMA-262, signed right shift)', () => {
    const rng = new GaussianNoise(7);
    for (let i = 0; i < 10000; i++) {
      const v = (rng.nextUint32() | 0) >> (i % 3); // any int32
      const s = 1 + (i % 20);
      expect(shiftRound(v, s, 'truncate')).toBe(v >> s);
    }
    expect(shiftRound(-5, 2, 'truncate')).toBe(-2);
  });

  it('mulShift is exact for 32-bit operands, checked against BigInt arithmetic (ECMA-262 BigInt)', () => {
    const rng = new GaussianNoise(11);
    for (let i = 0; i < 20000; i++) {
      const a = rng.nextUint32() | 0;
      const b = rng.nextUint32() | 0;
      const s = 16 + (i % 16);
      const p = BigInt(a) * BigInt(b);
      const truncated = p >> BigInt(s); // BigInt >> floors
      const nearest = (p + (1n << BigInt(s - 1))) >> BigInt(s);
      expect(mulShift(a, b, s, 'truncate')).toBe(Number(truncated));
      expect(mulShift(a, b, s, 'nearest')).toBe(Number(nearest));
    }
    expect(mulShift(-(2 ** 31), -(2 ** 31), 31, 'truncate')).toBe(2 ** 31);
  });

  it('the wide accumulator sums 4096 full-scale Q31 products exactly (BigInt reference)', () => {
    const rng = new GaussianNoise(12);
    for (const extreme of [false, true]) {
      const acc = new WideAccumulator();
      let exact = 0n;
      for (let i = 0; i < 4096; i++) {
        const a = extreme ? -(2 ** 31) : rng.nextUint32() | 0;
        const b = extreme ? -(2 ** 31) : rng.nextUint32() | 0;
        acc.add(a, b);
        exact += BigInt(a) * BigInt(b);
      }
      expect(acc.result(31, 'truncate')).toBe(Number(exact >> 31n));
      acc.clear();
    }
  });
});
