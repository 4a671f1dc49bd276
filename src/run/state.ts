import { deflateRawSync, inflateRawSync } from 'node:zlib';

/**
 * A run's exact state, taken between two blocks and put back into a run built from the same
 * settings, so that it goes on bit for bit as the original would (a captured episode replays to
 * the decisions it made live). The state is read by walking the objects' own fields: typed arrays
 * (delay lines, weights, WebAssembly memory views), numbers, booleans, strings, bigints and the
 * values of exported WebAssembly globals, recursively, in field order. A run built from the same
 * settings has the same fields in the same order, so the values go back where they came from;
 * anything that does not line up is refused with the field's path. Hand-written because the
 * kernels' state is private to each kernel (and partly inside WebAssembly): a walk keeps every
 * kernel's fields its own business, and a new kernel is covered without code of its own.
 */

/** Fields that are configuration, wiring or per-call scratch, not state: rebuilt from the settings. */
const SKIP = new Set(['spec', 'listener', 'sink', 'current', 'pendingSettings', 'opts', 'settings', 'cleanOut', 'adaptiveOut', 'lone']);

type Scalar = number | boolean | string | bigint | null;

export interface RunState {
  readonly format: typeof STATE_FORMAT;
  /** Each typed array's bytes (a copy), in walk order, with its kind and length. */
  readonly arrays: { kind: string; length: number; bytes: Uint8Array }[];
  /** Every scalar in walk order: numbers as they are (non-finite and -0 spelled out), others tagged. */
  readonly scalars: (number | string | [string, string])[];
}

/** A state as JSON can hold it: each array's bytes deflated and base64 (delay lines and scratch are mostly zeros). */
export interface EncodedRunState {
  readonly format: typeof STATE_FORMAT;
  readonly arrays: { kind: string; length: number; deflated: string }[];
  readonly scalars: RunState['scalars'];
}

export function encodeState(s: RunState): EncodedRunState {
  return { format: s.format, arrays: s.arrays.map((a) => ({ kind: a.kind, length: a.length, deflated: deflateRawSync(a.bytes).toString('base64') })), scalars: s.scalars };
}

export function decodeState(s: EncodedRunState): RunState {
  if (s?.format !== STATE_FORMAT || !Array.isArray(s.arrays) || !Array.isArray(s.scalars)) throw new Error(`the state is not ${STATE_FORMAT}`);
  return { format: s.format, arrays: s.arrays.map((a) => ({ kind: a.kind, length: a.length, bytes: inflateRawSync(Buffer.from(a.deflated, 'base64')) })), scalars: s.scalars };
}

export const STATE_FORMAT = 'tapwarden-run-state/1';

type TypedArray = Float64Array | Float32Array | Int32Array | Int16Array | Uint8Array | Uint32Array | Int8Array | Uint16Array | BigInt64Array;

const isTyped = (v: unknown): v is TypedArray => ArrayBuffer.isView(v) && !(v instanceof DataView);

function encodeScalar(v: Scalar): RunState['scalars'][number] {
  if (typeof v === 'number') return Number.isFinite(v) && !Object.is(v, -0) ? v : ['n', String(Object.is(v, -0) ? '-0' : v)];
  if (typeof v === 'bigint') return ['b', v.toString()];
  if (typeof v === 'boolean') return ['t', v ? '1' : '0'];
  if (v === null) return ['z', ''];
  return v;
}

function decodeScalar(e: RunState['scalars'][number]): Scalar {
  if (typeof e === 'number' || typeof e === 'string') return e;
  const [tag, s] = e;
  if (tag === 'n') return s === '-0' ? -0 : Number(s);
  if (tag === 'b') return BigInt(s);
  if (tag === 't') return s === '1';
  return null;
}

interface Visitor {
  array(path: string, a: TypedArray): void;
  /** Returns the value to store back (restore) or the value itself (capture). */
  scalar(path: string, v: Scalar): Scalar;
}

const isPlain = (v: object) => {
  const p = Object.getPrototypeOf(v);
  return p === Object.prototype || p === null || Array.isArray(v);
};

function walk(obj: object, path: string, visit: Visitor, seen: Set<object>, restoring: boolean): void {
  seen.add(obj);
  for (const key of Object.keys(obj)) {
    if (SKIP.has(key)) continue;
    const here = `${path}.${key}`;
    const v = (obj as Record<string, unknown>)[key];
    if (isTyped(v)) visit.array(here, v);
    else if (v instanceof WebAssembly.Global) {
      const out = visit.scalar(here, v.value as Scalar);
      if (restoring) v.value = out;
    } else if (v === null || ['number', 'boolean', 'string', 'bigint'].includes(typeof v)) {
      const out = visit.scalar(here, v as Scalar);
      if (restoring && out !== v) (obj as Record<string, unknown>)[key] = out;
    } else if (typeof v === 'object' && !(v instanceof WebAssembly.Memory) && !(v instanceof WebAssembly.Module) && !(v instanceof ArrayBuffer)) {
      // An object reached twice (a format two kernels share) is walked once.
      if (seen.has(v)) continue;
      seen.add(v);
      // A plain object may be shared or frozen (a constant initial state): a copy takes the
      // restored values, and replaces it.
      const target = restoring && isPlain(v) ? (Array.isArray(v) ? [...v] : { ...v }) : v;
      walk(target, here, visit, seen, restoring);
      if (target !== v) (obj as Record<string, unknown>)[key] = target;
    }
  }
}

const coversWhole = (a: TypedArray) => a.byteOffset === 0 && a.byteLength === a.buffer.byteLength;

/**
 * The buffers some field views whole (a WebAssembly memory's byte view): its other views (the
 * weights, the sample buffers) are taken and put back with it, not a second time.
 */
function wholeBuffers(root: object): Set<ArrayBufferLike> {
  const whole = new Set<ArrayBufferLike>();
  walk(root, '', { array: (_p, a) => void (coversWhole(a) && whole.add(a.buffer)), scalar: (_p, v) => v }, new Set(), false);
  return whole;
}

/** The state of `root` (a run: its engine, kernels and forecaster). */
export function captureState(root: object): RunState {
  const arrays: RunState['arrays'] = [];
  const scalars: RunState['scalars'] = [];
  const whole = wholeBuffers(root);
  walk(
    root,
    '',
    {
      array: (_p, a) => {
        if (!coversWhole(a) && whole.has(a.buffer)) return;
        arrays.push({ kind: a.constructor.name, length: a.length, bytes: new Uint8Array(a.buffer, a.byteOffset, a.byteLength).slice() });
      },
      scalar: (_p, v) => {
        scalars.push(encodeScalar(v));
        return v;
      },
    },
    new Set(),
    false,
  );
  return { format: STATE_FORMAT, arrays, scalars };
}

/** Puts a captured state back into a run built from the same settings; throws with the first field that does not fit. */
export function restoreState(root: object, state: RunState): void {
  if (state.format !== STATE_FORMAT) throw new Error(`the state is not ${STATE_FORMAT}`);
  let ai = 0;
  let si = 0;
  const whole = wholeBuffers(root);
  walk(
    root,
    '',
    {
      array: (path, a) => {
        if (!coversWhole(a) && whole.has(a.buffer)) return;
        const s = state.arrays[ai++];
        if (s === undefined || s.kind !== a.constructor.name || s.length !== a.length) {
          throw new Error(`the state does not fit this run at ${path.slice(1)} (${a.constructor.name}[${a.length}] here, ${s ? `${s.kind}[${s.length}]` : 'nothing'} in the state)`);
        }
        if (s.bytes.length !== a.byteLength) throw new Error(`the state does not fit this run at ${path.slice(1)} (${s.bytes.length} bytes in the state for ${a.byteLength})`);
        new Uint8Array(a.buffer, a.byteOffset, a.byteLength).set(s.bytes);
      },
      scalar: (path, v) => {
        if (si >= state.scalars.length) throw new Error(`the state does not fit this run at ${path.slice(1)} (the state ends first)`);
        const out = decodeScalar(state.scalars[si++]!);
        if (typeof out !== typeof v && !(v === null || out === null)) throw new Error(`the state does not fit this run at ${path.slice(1)} (${typeof v} here, ${typeof out} in the state)`);
        return out;
      },
    },
    new Set(),
    true,
  );
  if (ai !== state.arrays.length || si !== state.scalars.length) throw new Error('the state does not fit this run (it holds more than the run has)');
}
