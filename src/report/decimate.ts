/**
 * Min/max decimation for display: a long series is cut into columns and each column is drawn as
 * its first and last time with the column's minimum and maximum (in the order they occur), so the
 * drawn envelope holds every extreme and nothing is cut off.
 */
export interface Decimated {
  t: number[];
  ys: Array<Array<number | null>>;
}

export function decimate(t: readonly number[], ys: ReadonlyArray<ReadonlyArray<number | null>>, columns: number): Decimated {
  const n = t.length;
  if (n <= 2 * columns) return { t: [...t], ys: ys.map((y) => [...y]) };
  const out: Decimated = { t: [], ys: ys.map(() => []) };
  for (let c = 0; c < columns; c++) {
    const a = Math.floor((c * n) / columns);
    const b = Math.floor(((c + 1) * n) / columns);
    if (b <= a) continue;
    out.t.push(t[a]!, t[b - 1]!);
    ys.forEach((y, s) => {
      let lo = Infinity;
      let hi = -Infinity;
      let loAt = a;
      let hiAt = a;
      for (let i = a; i < b; i++) {
        const v = y[i];
        if (v === null || v === undefined || !Number.isFinite(v)) continue;
        if (v < lo) [lo, loAt] = [v, i];
        if (v > hi) [hi, hiAt] = [v, i];
      }
      const col = out.ys[s]!;
      if (lo === Infinity) col.push(null, null);
      else if (loAt <= hiAt) col.push(lo, hi);
      else col.push(hi, lo);
    });
  }
  return out;
}
