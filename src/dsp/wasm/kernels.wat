;; tapwarden's fast kernels, hand-written WebAssembly text (SIMD for float64, float32 and q15's
;; update and FIR sum in i32x4 lanes; scalar i64 for q31). Built to dist/wasm/kernels.wasm by scripts/build-wasm.mjs (wabt).
;;
;; One instance serves one filter: its memory holds the weights, the doubled delay lines and the
;; sample buffers of one chunk; the host (src/dsp/wasm/fastKernels.ts) copies samples in and out
;; and keeps the layout in the offset globals below.
;;
;; The adaptive kernels fuse the update of sample n-1 with the filtering of sample n: one pass over
;; the weights computes w <- w - c w + g x(n-1) and accumulates w . x(n). The update of the last
;; sample of a call stays pending until the next call or an explicit flush, so every sample sees
;; exactly the weights the reference kernels (floatKernel.ts, fixedKernel.ts) give it. The delay
;; lines are doubled rings of M = L + 1 samples: x(n) is line[pos .. pos+L), x(n-1) is
;; line[pos+1 .. pos+L+1), both contiguous.
;;
;; Every mutable global is exported (g_NAME): with the memory, they are the whole state of a filter,
;; which src/run/state.ts reads and restores for captured episodes.

(module
  (memory (export "memory") 1)

  ;; layout (byte offsets), set by the host
  (global $oW (export "g_oW") (mut i32) (i32.const 0))    ;; weights: f64 (float) or i32 (fixed)
  (global $oLE (export "g_oLE") (mut i32) (i32.const 0))   ;; evaluation delay line (un-noised), 2L entries
  (global $oLA (export "g_oLA") (mut i32) (i32.const 0))   ;; adaptation delay line (noised), 2L entries
  (global $oX (export "g_oX") (mut i32) (i32.const 0))    ;; chunk inputs and outputs, f64
  (global $oD (export "g_oD") (mut i32) (i32.const 0))
  (global $oN (export "g_oN") (mut i32) (i32.const 0))
  (global $oY (export "g_oY") (mut i32) (i32.const 0))
  (global $oE (export "g_oE") (mut i32) (i32.const 0))

  ;; state
  (global $L (export "g_L") (mut i32) (i32.const 0))
  (global $M (export "g_M") (mut i32) (i32.const 1))
  (global $posE (export "g_posE") (mut i32) (i32.const 0))
  (global $posA (export "g_posA") (mut i32) (i32.const 0))
  (global $pend (export "g_pend") (mut i32) (i32.const 0))   ;; an update is pending
  (global $pg (export "g_pg") (mut f64) (f64.const 0))     ;; float: pending gain g and leak factor c
  (global $pc (export "g_pc") (mut f64) (f64.const 0))
  (global $qg (export "g_qg") (mut i64) (i64.const 0))     ;; fixed: pending gain g and leak lf
  (global $qlf (export "g_qlf") (mut i64) (i64.const 0))
  (global $energy (export "g_energy") (mut i64) (i64.const 0)) ;; fixed: Q30 reference energy
  (global $sat (export "g_sat") (mut i32) (i32.const 0))    ;; clipped signal stores, cumulative
  (global $mrEvery (export "g_mrEvery") (mut i32) (i32.const 0)) ;; weight-mean removal every this many adapted samples (0: never)
  (global $mrCount (export "g_mrCount") (mut i32) (i32.const 0)) ;; adapted samples since the last removal
  (global $satW (export "g_satW") (mut i32) (i32.const 0))   ;; clipped weight stores, cumulative

  (func (export "setLayout") (param $L i32) (param $oW i32) (param $oLE i32) (param $oLA i32)
        (param $oX i32) (param $oD i32) (param $oN i32) (param $oY i32) (param $oE i32)
    (global.set $L (local.get $L))
    (global.set $M (i32.add (local.get $L) (i32.const 1)))
    (global.set $oW (local.get $oW)) (global.set $oLE (local.get $oLE)) (global.set $oLA (local.get $oLA))
    (global.set $oX (local.get $oX)) (global.set $oD (local.get $oD)) (global.set $oN (local.get $oN))
    (global.set $oY (local.get $oY)) (global.set $oE (local.get $oE)))

  (func (export "getPosE") (result i32) (global.get $posE))
  (func (export "setPosE") (param i32) (global.set $posE (local.get 0)))
  (func (export "getSat") (result i32) (global.get $sat))
  (func (export "getSatW") (result i32) (global.get $satW))
  (func (export "reset")
    (global.set $posE (i32.const 0)) (global.set $posA (i32.const 0)) (global.set $pend (i32.const 0))
    (global.set $energy (i64.const 0)) (global.set $en (f64.const 0)) (global.set $count (i32.const 0))
    (global.set $wb (f64.const 0)) (global.set $xb (f64.const 0)) (global.set $mrCount (i32.const 0)))
  (func (export "setMeanRemoval") (param $every i32) (global.set $mrEvery (local.get $every)))

  ;; ---------------------------------------------------------------- float64

  ;; Pushes v into the delay line at byte offset $o with position global; returns the new pos.
  (func $push64 (param $o i32) (param $pos i32) (param $v f64) (result i32)
    (local $p i32)
    (local.set $p (select (i32.sub (global.get $M) (i32.const 1)) (i32.sub (local.get $pos) (i32.const 1))
                          (i32.eqz (local.get $pos))))
    (f64.store (i32.add (local.get $o) (i32.shl (local.get $p) (i32.const 3))) (local.get $v))
    (f64.store (i32.add (local.get $o) (i32.shl (i32.add (local.get $p) (global.get $M)) (i32.const 3))) (local.get $v))
    (local.get $p))

  ;; Clamps every weight to [-lim, lim] as the reference store does (NaN -> 0), counting clips.
  (func $clamp64 (param $lim f64)
    (local $k i32) (local $a i32) (local $v f64)
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 3))))
      (local.set $v (f64.load (local.get $a)))
      (if (i32.eqz (i32.and (f64.le (local.get $v) (local.get $lim)) (f64.ge (local.get $v) (f64.neg (local.get $lim)))))
        (then
          (f64.store (local.get $a)
            (select (local.get $lim)
              (select (f64.neg (local.get $lim)) (f64.const 0) (f64.lt (local.get $v) (f64.const 0)))
              (f64.gt (local.get $v) (f64.const 0))))
          (global.set $satW (i32.add (global.get $satW) (i32.const 1)))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l))))

  ;; Float dot products sum lane-wise partial sums, combined by $hsum, then the leftover taps one
  ;; by one. The order is fixed for each function, so results never depend on how samples are
  ;; chunked; the fused pass and the plain dot may differ in the last bit.

  (global $clipped (export "g_clipped") (mut i32) (i32.const 0))  ;; the last fused update stored a |w| > limit (or NaN)
  ;; Upper bounds on max |w| and on |x| in the delay lines. While (1 - c) wb + |g| xb stays within
  ;; the limit no store can clip, and the per-store check is skipped.
  (global $wb (export "g_wb") (mut f64) (f64.const 0))
  (global $xb (export "g_xb") (mut f64) (f64.const 0))

  (func $maxabs64 (result f64)
    (local $k i32) (local $m f64)
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $m (f64.max (local.get $m) (f64.abs (f64.load (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 3)))))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.get $m))

  ;; After the host changed the weights: the bound restarts from the true maximum.
  (func (export "f64Rebound") (global.set $wb (call $maxabs64)))

  (func $hsum (param $a0 v128) (param $a1 v128) (result f64)
    (f64.add (f64.add (f64x2.extract_lane 0 (local.get $a0)) (f64x2.extract_lane 1 (local.get $a0)))
             (f64.add (f64x2.extract_lane 0 (local.get $a1)) (f64x2.extract_lane 1 (local.get $a1)))))

  ;; w . line[pos ..] with four f64x2 accumulators (eight taps per step) so that the adds of
  ;; consecutive steps do not wait on each other; combined (a0 + a2) and (a1 + a3), then as $hsum.
  (func $dot64 (param $o i32) (param $pos i32) (result f64)
    (local $k i32) (local $a0 v128) (local $a1 v128) (local $a2 v128) (local $a3 v128)
    (local $s f64) (local $L8 i32) (local $px i32) (local $pw i32)
    (local.set $L8 (i32.and (global.get $L) (i32.const -8)))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 3))))
    (local.set $pw (global.get $oW))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (local.get $L8)))
      (local.set $a0 (f64x2.add (local.get $a0) (f64x2.mul (v128.load (local.get $pw)) (v128.load (local.get $px)))))
      (local.set $a1 (f64x2.add (local.get $a1) (f64x2.mul (v128.load offset=16 (local.get $pw)) (v128.load offset=16 (local.get $px)))))
      (local.set $a2 (f64x2.add (local.get $a2) (f64x2.mul (v128.load offset=32 (local.get $pw)) (v128.load offset=32 (local.get $px)))))
      (local.set $a3 (f64x2.add (local.get $a3) (f64x2.mul (v128.load offset=48 (local.get $pw)) (v128.load offset=48 (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 64)))
      (local.set $px (i32.add (local.get $px) (i32.const 64)))
      (local.set $k (i32.add (local.get $k) (i32.const 8)))
      (br $l)))
    (local.set $s (call $hsum (f64x2.add (local.get $a0) (local.get $a2)) (f64x2.add (local.get $a1) (local.get $a3))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $s (f64.add (local.get $s) (f64.mul (f64.load (local.get $pw)) (f64.load (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 8)))
      (local.set $px (i32.add (local.get $px) (i32.const 8)))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.get $s))

  ;; One pass: w <- (w - c w) + g line[pos + 1 + k] (the update with x(n-1)), then w . line[pos + k]
  ;; with the updated w. Sets $clipped when a stored |w| exceeds lim or is NaN (comparisons, not
  ;; f64x2.max, whose NaN handling costs several instructions per use).
  (func $fused64 (param $o i32) (param $pos i32) (param $g f64) (param $c f64) (param $lim f64) (result f64)
    (local $k i32) (local $a0 v128) (local $a1 v128) (local $m0 v128) (local $m1 v128) (local $lv v128)
    (local $w0 v128) (local $w1 v128) (local $gv v128) (local $cv v128) (local $x0 v128) (local $x1 v128)
    (local $s f64) (local $w f64) (local $ok i32) (local $L4 i32) (local $px i32) (local $pw i32)
    (local.set $m0 (v128.const i64x2 -1 -1))
    (local.set $m1 (v128.const i64x2 -1 -1))
    (local.set $lv (f64x2.splat (local.get $lim)))
    (local.set $L4 (i32.and (global.get $L) (i32.const -4)))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 3))))
    (local.set $pw (global.get $oW))
    (local.set $gv (f64x2.splat (local.get $g)))
    (local.set $cv (f64x2.splat (local.get $c)))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (local.get $L4)))
      ;; x(n) = line[pos + k .. + 4), x(n-1) = line[pos + 1 + k ..]: loaded at offsets 8 and 24
      (local.set $x0 (v128.load (local.get $px)))
      (local.set $x1 (v128.load offset=16 (local.get $px)))
      (local.set $w0 (v128.load (local.get $pw)))
      (local.set $w1 (v128.load offset=16 (local.get $pw)))
      (local.set $w0 (f64x2.add (f64x2.sub (local.get $w0) (f64x2.mul (local.get $cv) (local.get $w0)))
                                (f64x2.mul (local.get $gv) (v128.load offset=8 (local.get $px)))))
      (local.set $w1 (f64x2.add (f64x2.sub (local.get $w1) (f64x2.mul (local.get $cv) (local.get $w1)))
                                (f64x2.mul (local.get $gv) (v128.load offset=24 (local.get $px)))))
      (v128.store (local.get $pw) (local.get $w0))
      (v128.store offset=16 (local.get $pw) (local.get $w1))
      (local.set $m0 (v128.and (local.get $m0) (f64x2.le (f64x2.abs (local.get $w0)) (local.get $lv))))
      (local.set $m1 (v128.and (local.get $m1) (f64x2.le (f64x2.abs (local.get $w1)) (local.get $lv))))
      (local.set $a0 (f64x2.add (local.get $a0) (f64x2.mul (local.get $w0) (local.get $x0))))
      (local.set $a1 (f64x2.add (local.get $a1) (f64x2.mul (local.get $w1) (local.get $x1))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 32)))
      (local.set $px (i32.add (local.get $px) (i32.const 32)))
      (local.set $k (i32.add (local.get $k) (i32.const 4)))
      (br $l)))
    (local.set $s (call $hsum (local.get $a0) (local.get $a1)))
    (local.set $ok (i64x2.all_true (v128.and (local.get $m0) (local.get $m1))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $w (f64.load (local.get $pw)))
      (local.set $w (f64.add (f64.sub (local.get $w) (f64.mul (local.get $c) (local.get $w)))
                             (f64.mul (local.get $g) (f64.load offset=8 (local.get $px)))))
      (f64.store (local.get $pw) (local.get $w))
      (local.set $ok (i32.and (local.get $ok) (f64.le (f64.abs (local.get $w)) (local.get $lim))))
      (local.set $s (f64.add (local.get $s) (f64.mul (local.get $w) (f64.load (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 8)))
      (local.set $px (i32.add (local.get $px) (i32.const 8)))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (global.set $clipped (i32.eqz (local.get $ok)))
    (local.get $s))

  ;; The same pass without the per-store limit check, for when the weight bound proves no store
  ;; can reach the limit (see f64Run).
  (func $fused64Fast (param $o i32) (param $pos i32) (param $g f64) (param $c f64) (result f64)
    (local $k i32) (local $a0 v128) (local $a1 v128) 
    (local $w0 v128) (local $w1 v128) (local $gv v128) (local $cv v128) (local $x0 v128) (local $x1 v128)
    (local $s f64) (local $w f64) (local $L4 i32) (local $px i32) (local $pw i32)
    (local.set $L4 (i32.and (global.get $L) (i32.const -4)))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 3))))
    (local.set $pw (global.get $oW))
    (local.set $gv (f64x2.splat (local.get $g)))
    (local.set $cv (f64x2.splat (local.get $c)))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (local.get $L4)))
      ;; x(n) = line[pos + k .. + 4), x(n-1) = line[pos + 1 + k ..]: loaded at offsets 8 and 24
      (local.set $x0 (v128.load (local.get $px)))
      (local.set $x1 (v128.load offset=16 (local.get $px)))
      (local.set $w0 (v128.load (local.get $pw)))
      (local.set $w1 (v128.load offset=16 (local.get $pw)))
      (local.set $w0 (f64x2.add (f64x2.sub (local.get $w0) (f64x2.mul (local.get $cv) (local.get $w0)))
                                (f64x2.mul (local.get $gv) (v128.load offset=8 (local.get $px)))))
      (local.set $w1 (f64x2.add (f64x2.sub (local.get $w1) (f64x2.mul (local.get $cv) (local.get $w1)))
                                (f64x2.mul (local.get $gv) (v128.load offset=24 (local.get $px)))))
      (v128.store (local.get $pw) (local.get $w0))
      (v128.store offset=16 (local.get $pw) (local.get $w1))
      (local.set $a0 (f64x2.add (local.get $a0) (f64x2.mul (local.get $w0) (local.get $x0))))
      (local.set $a1 (f64x2.add (local.get $a1) (f64x2.mul (local.get $w1) (local.get $x1))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 32)))
      (local.set $px (i32.add (local.get $px) (i32.const 32)))
      (local.set $k (i32.add (local.get $k) (i32.const 4)))
      (br $l)))
    (local.set $s (call $hsum (local.get $a0) (local.get $a1)))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $w (f64.load (local.get $pw)))
      (local.set $w (f64.add (f64.sub (local.get $w) (f64.mul (local.get $c) (local.get $w)))
                             (f64.mul (local.get $g) (f64.load offset=8 (local.get $px)))))
      (f64.store (local.get $pw) (local.get $w))
      (local.set $s (f64.add (local.get $s) (f64.mul (local.get $w) (f64.load (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 8)))
      (local.set $px (i32.add (local.get $px) (i32.const 8)))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.get $s))

  ;; The same without leak (c = 0): w <- w + g x(n-1). (w - 0 w equals w except for the sign of a
  ;; zero weight, which no output can see.)
  (func $fused64Plain (param $o i32) (param $pos i32) (param $g f64) (result f64)
    (local $k i32) (local $a0 v128) (local $a1 v128) (local $a2 v128) (local $a3 v128)
    (local $w0 v128) (local $w1 v128) (local $w2 v128) (local $w3 v128) (local $gv v128)
    (local $s f64) (local $w f64) (local $L8 i32) (local $px i32) (local $pw i32)
    (local.set $L8 (i32.and (global.get $L) (i32.const -8)))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 3))))
    (local.set $pw (global.get $oW))
    (local.set $gv (f64x2.splat (local.get $g)))
    ;; eight taps per step: x(n) at offsets 0..63, x(n-1) at 8..71
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (local.get $L8)))
      (local.set $w0 (f64x2.add (v128.load (local.get $pw)) (f64x2.mul (local.get $gv) (v128.load offset=8 (local.get $px)))))
      (local.set $w1 (f64x2.add (v128.load offset=16 (local.get $pw)) (f64x2.mul (local.get $gv) (v128.load offset=24 (local.get $px)))))
      (local.set $w2 (f64x2.add (v128.load offset=32 (local.get $pw)) (f64x2.mul (local.get $gv) (v128.load offset=40 (local.get $px)))))
      (local.set $w3 (f64x2.add (v128.load offset=48 (local.get $pw)) (f64x2.mul (local.get $gv) (v128.load offset=56 (local.get $px)))))
      (v128.store (local.get $pw) (local.get $w0))
      (v128.store offset=16 (local.get $pw) (local.get $w1))
      (v128.store offset=32 (local.get $pw) (local.get $w2))
      (v128.store offset=48 (local.get $pw) (local.get $w3))
      (local.set $a0 (f64x2.add (local.get $a0) (f64x2.mul (local.get $w0) (v128.load (local.get $px)))))
      (local.set $a1 (f64x2.add (local.get $a1) (f64x2.mul (local.get $w1) (v128.load offset=16 (local.get $px)))))
      (local.set $a2 (f64x2.add (local.get $a2) (f64x2.mul (local.get $w2) (v128.load offset=32 (local.get $px)))))
      (local.set $a3 (f64x2.add (local.get $a3) (f64x2.mul (local.get $w3) (v128.load offset=48 (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 64)))
      (local.set $px (i32.add (local.get $px) (i32.const 64)))
      (local.set $k (i32.add (local.get $k) (i32.const 8)))
      (br $l)))
    (local.set $s (call $hsum (f64x2.add (local.get $a0) (local.get $a2)) (f64x2.add (local.get $a1) (local.get $a3))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $w (f64.add (f64.load (local.get $pw)) (f64.mul (local.get $g) (f64.load offset=8 (local.get $px)))))
      (f64.store (local.get $pw) (local.get $w))
      (local.set $s (f64.add (local.get $s) (f64.mul (local.get $w) (f64.load (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 8)))
      (local.set $px (i32.add (local.get $px) (i32.const 8)))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.get $s))

  ;; Sum of line[pos + k]^2 (the exact recomputation of the running energy).
  (func $energy64 (param $o i32) (param $pos i32) (result f64)
    (local $k i32) (local $s f64) (local $v f64) (local $px i32)
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 3))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $v (f64.load (i32.add (local.get $px) (i32.shl (local.get $k) (i32.const 3)))))
      (local.set $s (f64.add (local.get $s) (f64.mul (local.get $v) (local.get $v))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.get $s))

  ;; w <- (w - c w) + g line[pos + k] for every k; returns the largest |w| (NaN if any is NaN).
  (func $update64 (param $o i32) (param $pos i32) (param $g f64) (param $c f64) (result f64)
    (local $k i32) (local $a i32) (local $w f64) (local $m f64) (local $px i32)
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 3))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 3))))
      (local.set $w (f64.load (local.get $a)))
      (local.set $w (f64.add (f64.sub (local.get $w) (f64.mul (local.get $c) (local.get $w)))
                             (f64.mul (local.get $g) (f64.load (i32.add (local.get $px) (i32.shl (local.get $k) (i32.const 3)))))))
      (f64.store (local.get $a) (local.get $w))
      (local.set $m (f64.max (local.get $m) (f64.abs (local.get $w))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.get $m))

  ;; Applies a pending update with the current delay line (before weights are read or changed).
  (func (export "f64Flush") (param $noise i32) (param $lim f64) (call $flush64 (local.get $noise) (local.get $lim)))
  (func $flush64 (param $noise i32) (param $lim f64)
    (if (global.get $pend) (then
      (if (i32.eqz (f64.le
            (if (result f64) (local.get $noise)
              (then (call $update64 (global.get $oLA) (global.get $posA) (global.get $pg) (global.get $pc)))
              (else (call $update64 (global.get $oLE) (global.get $posE) (global.get $pg) (global.get $pc))))
            (local.get $lim)))
        (then (call $clamp64 (local.get $lim))))
      (global.set $wb (call $maxabs64))
      (global.set $pend (i32.const 0)))))

  ;; Weight-mean removal (float64): m = sum_k w[k] / L, summed in tap order; w[k] <- w[k] - m.
  (func $removeMean64
    (local $k i32) (local $a i32) (local $sum f64) (local $m f64)
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $sum (f64.add (local.get $sum) (f64.load (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 3))))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.set $m (f64.div (local.get $sum) (f64.convert_i32_u (global.get $L))))
    (local.set $k (i32.const 0))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 3))))
      (f64.store (local.get $a) (f64.sub (f64.load (local.get $a)) (local.get $m)))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (global.set $wb (call $maxabs64)))

  ;; The NLMS energy ||x||^2 of the adaptation line, kept as a running sum and recomputed exactly
  ;; every 4096 samples (counted from reset, so the result does not depend on chunking).
  (global $en (export "g_en") (mut f64) (f64.const 0))
  (global $count (export "g_count") (mut i32) (i32.const 0))

  ;; n samples of the float64 LMS/NLMS adaptive path. flags: 1 nlms, 2 noise, 4 adapting.
  (func (export "f64Run") (param $n i32) (param $flags i32) (param $mu f64) (param $delta f64)
        (param $leak f64) (param $shiftc f64) (param $lim f64)
    (local $i i32) (local $i8 i32) (local $noise i32) (local $oU i32) (local $posU i32)
    (local $xe f64) (local $xa f64) (local $xold f64) (local $d f64)
    (local $yE f64) (local $yA f64) (local $e f64) (local $err f64) (local $mun f64) (local $m f64) (local $nb f64)
    (local.set $noise (i32.and (local.get $flags) (i32.const 2)))
    (local.set $oU (select (global.get $oLA) (global.get $oLE) (local.get $noise)))
    (block $end (loop $sample
      (br_if $end (i32.ge_u (local.get $i) (local.get $n)))
      (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
      (local.set $d (f64.load (i32.add (global.get $oD) (local.get $i8))))
      (local.set $xe (f64.load (i32.add (global.get $oX) (local.get $i8))))
      (global.set $posE (call $push64 (global.get $oLE) (global.get $posE) (local.get $xe)))
      (local.set $xa (local.get $xe))
      (if (local.get $noise) (then
        (local.set $xa (f64.add (local.get $xe) (f64.load (i32.add (global.get $oN) (local.get $i8)))))
        (global.set $posA (call $push64 (global.get $oLA) (global.get $posA) (local.get $xa)))))
      (local.set $posU (select (global.get $posA) (global.get $posE) (local.get $noise)))
      ;; running energy: + x(n)^2 - x(n-L)^2, exact every 4096 samples
      (local.set $xold (f64.load (i32.add (local.get $oU) (i32.shl (i32.add (local.get $posU) (global.get $L)) (i32.const 3)))))
      (global.set $count (i32.add (global.get $count) (i32.const 1)))
      (if (i32.eqz (i32.and (global.get $count) (i32.const 4095)))
        (then (global.set $en (call $energy64 (local.get $oU) (local.get $posU))))
        (else (global.set $en (f64.max (f64.const 0)
          (f64.sub (f64.add (global.get $en) (f64.mul (local.get $xa) (local.get $xa))) (f64.mul (local.get $xold) (local.get $xold)))))))
      (global.set $xb (f64.max (global.get $xb) (f64.abs (local.get $xa))))
      (global.set $xb (f64.max (global.get $xb) (f64.abs (local.get $xe))))
      (if (i32.and (global.get $pend) (i32.eqz (local.get $noise)))
        (then
          ;; the common case: update and filter in one pass
          (local.set $nb (f64.add (f64.mul (global.get $wb) (f64.abs (f64.sub (f64.const 1) (global.get $pc))))
                                  (f64.mul (f64.abs (global.get $pg)) (global.get $xb))))
          (if (f64.le (local.get $nb) (local.get $lim))
            (then
              (local.set $yE (if (result f64) (f64.eq (global.get $pc) (f64.const 0))
                (then (call $fused64Plain (global.get $oLE) (global.get $posE) (global.get $pg)))
                (else (call $fused64Fast (global.get $oLE) (global.get $posE) (global.get $pg) (global.get $pc)))))
              (global.set $wb (local.get $nb)))
            (else
              (local.set $yE (call $fused64 (global.get $oLE) (global.get $posE) (global.get $pg) (global.get $pc) (local.get $lim)))
              (if (global.get $clipped)
                (then (call $clamp64 (local.get $lim))
                      (local.set $yE (call $dot64 (global.get $oLE) (global.get $posE)))))
              (global.set $wb (call $maxabs64))))
          (global.set $pend (i32.const 0))
          (local.set $yA (local.get $yE)))
        (else
          (if (global.get $pend) (then
            ;; with noise: update with x_a(n-1), then filter both lines
            (local.set $m (call $update64 (global.get $oLA) (i32.add (global.get $posA) (i32.const 1)) (global.get $pg) (global.get $pc)))
            (if (i32.eqz (f64.le (local.get $m) (local.get $lim))) (then (call $clamp64 (local.get $lim))))
            (global.set $wb (call $maxabs64))
            (global.set $pend (i32.const 0))))
          (local.set $yE (call $dot64 (global.get $oLE) (global.get $posE)))
          (local.set $yA (local.get $yE))
          (if (local.get $noise) (then (local.set $yA (call $dot64 (global.get $oLA) (global.get $posA)))))))
      (local.set $e (f64.sub (local.get $d) (local.get $yE)))
      (f64.store (i32.add (global.get $oY) (local.get $i8)) (local.get $yE))
      (f64.store (i32.add (global.get $oE) (local.get $i8)) (local.get $e))
      (if (i32.and (local.get $flags) (i32.const 4)) (then
        (local.set $err (f64.sub (local.get $d) (local.get $yA)))
        ;; NLMS: mu / (delta + ||x||^2), or no step at all when that is 0 (a silent reference, delta 0)
        (local.set $m (f64.add (local.get $delta) (global.get $en)))
        (local.set $mun (select
          (select (f64.div (local.get $mu) (local.get $m)) (f64.const 0) (f64.gt (local.get $m) (f64.const 0)))
          (local.get $mu)
          (i32.and (local.get $flags) (i32.const 1))))
        (global.set $pg (f64.mul (local.get $mun) (local.get $err)))
        ;; the leak uses the unnormalized step (bounded through silence)
        (global.set $pc (f64.add (f64.mul (local.get $mu) (local.get $leak)) (local.get $shiftc)))
        (global.set $pend (i32.const 1))
        (if (global.get $mrEvery) (then
          (global.set $mrCount (i32.add (global.get $mrCount) (i32.const 1)))
          (if (i32.ge_u (global.get $mrCount) (global.get $mrEvery)) (then
            (global.set $mrCount (i32.const 0))
            (call $flush64 (local.get $noise) (local.get $lim))
            (call $removeMean64)))))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $sample))))

  ;; n samples of a fixed-weight float64 FIR: y = w . x, e = d - y.
  (func (export "f64Fir") (param $n i32)
    (local $i i32) (local $i8 i32) (local $y f64)
    (block $end (loop $sample
      (br_if $end (i32.ge_u (local.get $i) (local.get $n)))
      (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
      (global.set $posE (call $push64 (global.get $oLE) (global.get $posE) (f64.load (i32.add (global.get $oX) (local.get $i8)))))
      (local.set $y (call $dot64 (global.get $oLE) (global.get $posE)))
      (f64.store (i32.add (global.get $oY) (local.get $i8)) (local.get $y))
      (f64.store (i32.add (global.get $oE) (local.get $i8)) (f64.sub (f64.load (i32.add (global.get $oD) (local.get $i8))) (local.get $y)))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $sample))))

;; ---------------------------------------------------------------- float32
  ;; The single-precision target of float32Kernel.ts (DEVELOPERS.md "float32 operator sequence"):
  ;; weights and delay lines are f32, every operation is one f32 instruction (WebAssembly rounds
  ;; each to binary32, to nearest even, and never fuses), sums run in tap order. Not fused across
  ;; samples: the update of sample n finishes before sample n+1 is filtered.

  ;; float32 delay lines are doubled rings of M32 = L + 3 samples, so the clean FIR can filter
  ;; four samples at once (x(n+3-k) .. x(n-k) contiguous for every k).
  (global $M32 (export "g_M32") (mut i32) (i32.const 4))
  (func (export "setRing32") (global.set $M32 (i32.add (global.get $L) (i32.const 3))))

  (func $push32f (param $o i32) (param $pos i32) (param $v f32) (result i32)
    (local $p i32)
    (local.set $p (select (i32.sub (global.get $M32) (i32.const 1)) (i32.sub (local.get $pos) (i32.const 1))
                          (i32.eqz (local.get $pos))))
    (f32.store (i32.add (local.get $o) (i32.shl (local.get $p) (i32.const 2))) (local.get $v))
    (f32.store (i32.add (local.get $o) (i32.shl (i32.add (local.get $p) (global.get $M32)) (i32.const 2))) (local.get $v))
    (local.get $p))

  ;; The dot product and the energy of the same line in one pass (two independent f32 chains,
  ;; each in tap order); the energy goes to $en32.
  (global $en32 (export "g_en32") (mut f32) (f32.const 0))
  (func $dotEnergy32f (param $o i32) (param $pos i32) (result f32)
    (local $acc f32) (local $s f32) (local $v f32) (local $pw i32) (local $px i32) (local $end i32)
    (local.set $pw (global.get $oW))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 2))))
    (local.set $end (i32.add (local.get $pw) (i32.shl (global.get $L) (i32.const 2))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $pw) (local.get $end)))
      (local.set $v (f32.load (local.get $px)))
      (local.set $acc (f32.add (local.get $acc) (f32.mul (f32.load (local.get $pw)) (local.get $v))))
      (local.set $s (f32.add (local.get $s) (f32.mul (local.get $v) (local.get $v))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 4)))
      (local.set $px (i32.add (local.get $px) (i32.const 4)))
      (br $l)))
    (global.set $en32 (local.get $s))
    (local.get $acc))

  ;; acc = acc + w[k] x[pos + k], k = 0 .. L-1, in f32.
  (func $dot32f (param $o i32) (param $pos i32) (result f32)
    (local $k i32) (local $acc f32) (local $pw i32) (local $px i32) (local $end i32)
    (local.set $pw (global.get $oW))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 2))))
    (local.set $end (i32.add (local.get $pw) (i32.shl (global.get $L) (i32.const 2))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $pw) (local.get $end)))
      (local.set $acc (f32.add (local.get $acc) (f32.mul (f32.load (local.get $pw)) (f32.load (local.get $px)))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 4)))
      (local.set $px (i32.add (local.get $px) (i32.const 4)))
      (br $l)))
    (local.get $acc))

  ;; w <- (w - c w) + g x[pos + k], stored as +-lim (0 for NaN) and counted when outside [-lim, lim].
  (func $update32f (param $o i32) (param $pos i32) (param $g f32) (param $c f32) (param $lim f32)
    (local $pw i32) (local $px i32) (local $end i32) (local $end4 i32) (local $w f32) (local $v f32)
    (local $vg v128) (local $vc v128) (local $vl v128) (local $vn v128) (local $vw v128) (local $vv v128)
    (local.set $pw (global.get $oW))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 2))))
    (local.set $end (i32.add (local.get $pw) (i32.shl (global.get $L) (i32.const 2))))
    ;; four taps at a time (lane-wise f32: the same roundings); a group with a lane out of range
    ;; is redone one tap at a time below
    (local.set $vg (f32x4.splat (local.get $g)))
    (local.set $vc (f32x4.splat (local.get $c)))
    (local.set $vl (f32x4.splat (local.get $lim)))
    (local.set $vn (f32x4.splat (f32.neg (local.get $lim))))
    (local.set $end4 (i32.add (local.get $pw) (i32.shl (i32.and (global.get $L) (i32.const -4)) (i32.const 2))))
    (block $done4 (loop $l4
      (br_if $done4 (i32.ge_u (local.get $pw) (local.get $end4)))
      (local.set $vw (v128.load (local.get $pw)))
      (local.set $vv (f32x4.add (f32x4.sub (local.get $vw) (f32x4.mul (local.get $vc) (local.get $vw)))
                                (f32x4.mul (local.get $vg) (v128.load (local.get $px)))))
      (br_if $done4 (i32.eqz (i32x4.all_true (v128.and (f32x4.le (local.get $vv) (local.get $vl)) (f32x4.ge (local.get $vv) (local.get $vn))))))
      (v128.store (local.get $pw) (local.get $vv))
      (local.set $pw (i32.add (local.get $pw) (i32.const 16)))
      (local.set $px (i32.add (local.get $px) (i32.const 16)))
      (br $l4)))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $pw) (local.get $end)))
      (local.set $w (f32.load (local.get $pw)))
      (local.set $v (f32.add (f32.sub (local.get $w) (f32.mul (local.get $c) (local.get $w)))
                             (f32.mul (local.get $g) (f32.load (local.get $px)))))
      (if (i32.eqz (i32.and (f32.le (local.get $v) (local.get $lim)) (f32.ge (local.get $v) (f32.neg (local.get $lim)))))
        (then
          (local.set $v (select (local.get $lim)
                          (select (f32.neg (local.get $lim)) (f32.const 0) (f32.lt (local.get $v) (f32.const 0)))
                          (f32.gt (local.get $v) (f32.const 0))))
          (global.set $satW (i32.add (global.get $satW) (i32.const 1)))))
      (f32.store (local.get $pw) (local.get $v))
      (local.set $pw (i32.add (local.get $pw) (i32.const 4)))
      (local.set $px (i32.add (local.get $px) (i32.const 4)))
      (br $l)))) 

  ;; Weight-mean removal: S = sum in tap order, m = S / L, w <- w - m (all f32).
  (func $removeMean32f
    (local $k i32) (local $a i32) (local $sum f32) (local $m f32)
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $sum (f32.add (local.get $sum) (f32.load (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (local.set $m (f32.div (local.get $sum) (f32.convert_i32_u (global.get $L))))
    (local.set $k (i32.const 0))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))
      (f32.store (local.get $a) (f32.sub (f32.load (local.get $a)) (local.get $m)))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l))))

  ;; n samples of the float32 LMS/NLMS adaptive path. flags: 1 nlms, 2 noise, 4 adapting.
  ;; mu, delta, c (the leak factor) and lim are binary32 already (float32Constants).
  (func (export "f32Run") (param $n i32) (param $flags i32) (param $mu f32) (param $delta f32) (param $c f32) (param $lim f32)
    (local $i i32) (local $i8 i32) (local $noise i32) (local $oU i32) (local $posU i32)
    (local $xe f32) (local $d f32) (local $yE f32) (local $e f32) (local $err f32) (local $st f32) (local $norm f32)
    (local.set $noise (i32.and (local.get $flags) (i32.const 2)))
    (local.set $oU (select (global.get $oLA) (global.get $oLE) (local.get $noise)))
    (block $end (loop $sample
      (br_if $end (i32.ge_u (local.get $i) (local.get $n)))
      (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
      (local.set $d (f32.demote_f64 (f64.load (i32.add (global.get $oD) (local.get $i8)))))
      (local.set $xe (f32.demote_f64 (f64.load (i32.add (global.get $oX) (local.get $i8)))))
      (global.set $posE (call $push32f (global.get $oLE) (global.get $posE) (local.get $xe)))
      (if (local.get $noise) (then
        (global.set $posA (call $push32f (global.get $oLA) (global.get $posA)
          (f32.add (local.get $xe) (f32.demote_f64 (f64.load (i32.add (global.get $oN) (local.get $i8)))))))))
      (local.set $posU (select (global.get $posA) (global.get $posE) (local.get $noise)))
      (local.set $yE (if (result f32) (i32.and (local.get $flags) (i32.const 1))
        (then (call $dotEnergy32f (global.get $oLE) (global.get $posE)))
        (else (call $dot32f (global.get $oLE) (global.get $posE)))))
      (local.set $e (f32.sub (local.get $d) (local.get $yE)))
      (f64.store (i32.add (global.get $oY) (local.get $i8)) (f64.promote_f32 (local.get $yE)))
      (f64.store (i32.add (global.get $oE) (local.get $i8)) (f64.promote_f32 (local.get $e)))
      (if (i32.and (local.get $flags) (i32.const 4)) (then
        (local.set $err (local.get $e))
        (if (local.get $noise) (then (local.set $err (f32.sub (local.get $d) (call $dotEnergy32f (global.get $oLA) (global.get $posA))))))
        (local.set $st (local.get $mu))
        (if (i32.and (local.get $flags) (i32.const 1)) (then
          (local.set $norm (f32.add (local.get $delta) (global.get $en32)))
          (local.set $st (select (f32.div (local.get $mu) (local.get $norm)) (f32.const 0) (f32.gt (local.get $norm) (f32.const 0))))))
        (call $update32f (local.get $oU) (local.get $posU) (f32.mul (local.get $st) (local.get $err)) (local.get $c) (local.get $lim))
        (if (global.get $mrEvery) (then
          (global.set $mrCount (i32.add (global.get $mrCount) (i32.const 1)))
          (if (i32.ge_u (global.get $mrCount) (global.get $mrEvery)) (then
            (global.set $mrCount (i32.const 0))
            (call $removeMean32f)))))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $sample))))

  (func $fir32out (param $i i32) (param $y f32)
    (local $i8 i32)
    (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
    (f64.store (i32.add (global.get $oY) (local.get $i8)) (f64.promote_f32 (local.get $y)))
    (f64.store (i32.add (global.get $oE) (local.get $i8))
      (f64.promote_f32 (f32.sub (f32.demote_f64 (f64.load (i32.add (global.get $oD) (local.get $i8)))) (local.get $y)))))

  ;; n samples of a fixed-weight float32 FIR: y = w . x in tap order, e = d - y. Four samples at a
  ;; time, one per lane, each lane its own tap-order chain (so the result is the scalar one).
  (func (export "f32Fir") (param $n i32)
    (local $i i32) (local $i8 i32) (local $y f32) (local $j i32) (local $acc v128) (local $pw i32) (local $px i32) (local $end i32)
    (local.set $end (i32.add (global.get $oW) (i32.shl (global.get $L) (i32.const 2))))
    (block $end4 (loop $group
      (br_if $end4 (i32.gt_u (i32.add (local.get $i) (i32.const 4)) (local.get $n)))
      (local.set $j (i32.const 0))
      (block $pushed (loop $push
        (br_if $pushed (i32.ge_u (local.get $j) (i32.const 4)))
        (global.set $posE (call $push32f (global.get $oLE) (global.get $posE)
          (f32.demote_f64 (f64.load (i32.add (global.get $oX) (i32.shl (i32.add (local.get $i) (local.get $j)) (i32.const 3)))))))
        (local.set $j (i32.add (local.get $j) (i32.const 1)))
        (br $push)))
      ;; lane 0 is sample i+3 (the newest), lane 3 sample i
      (local.set $acc (v128.const f32x4 0 0 0 0))
      (local.set $pw (global.get $oW))
      (local.set $px (i32.add (global.get $oLE) (i32.shl (global.get $posE) (i32.const 2))))
      (block $done (loop $tap
        (br_if $done (i32.ge_u (local.get $pw) (local.get $end)))
        (local.set $acc (f32x4.add (local.get $acc) (f32x4.mul (f32x4.splat (f32.load (local.get $pw))) (v128.load (local.get $px)))))
        (local.set $pw (i32.add (local.get $pw) (i32.const 4)))
        (local.set $px (i32.add (local.get $px) (i32.const 4)))
        (br $tap)))
      (call $fir32out (local.get $i) (f32x4.extract_lane 3 (local.get $acc)))
      (call $fir32out (i32.add (local.get $i) (i32.const 1)) (f32x4.extract_lane 2 (local.get $acc)))
      (call $fir32out (i32.add (local.get $i) (i32.const 2)) (f32x4.extract_lane 1 (local.get $acc)))
      (call $fir32out (i32.add (local.get $i) (i32.const 3)) (f32x4.extract_lane 0 (local.get $acc)))
      (local.set $i (i32.add (local.get $i) (i32.const 4)))
      (br $group)))
    (block $end (loop $sample
      (br_if $end (i32.ge_u (local.get $i) (local.get $n)))
      (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
      (global.set $posE (call $push32f (global.get $oLE) (global.get $posE) (f32.demote_f64 (f64.load (i32.add (global.get $oX) (local.get $i8))))))
      (local.set $y (call $dot32f (global.get $oLE) (global.get $posE)))
      (f64.store (i32.add (global.get $oY) (local.get $i8)) (f64.promote_f32 (local.get $y)))
      (f64.store (i32.add (global.get $oE) (local.get $i8))
        (f64.promote_f32 (f32.sub (f32.demote_f64 (f64.load (i32.add (global.get $oD) (local.get $i8)))) (local.get $y))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $sample))))

  ;; ---------------------------------------------------------------- fixed point (q15, q31)
  ;; Integers in i64 registers; weights and delay lines stored as i32. $f is 15 or 31, $rn is 1
  ;; for round-to-nearest and 0 for truncation (toward minus infinity, as i64.shr_s does).

  (global $f (export "g_f") (mut i64) (i64.const 15))
  (global $rn (export "g_rn") (mut i64) (i64.const 1))
  (global $qmax (export "g_qmax") (mut i64) (i64.const 32767))
  (global $qmin (export "g_qmin") (mut i64) (i64.const -32768))

  (func (export "setFormat") (param $f i32) (param $rn i32)
    (global.set $f (i64.extend_i32_u (local.get $f)))
    (global.set $rn (i64.extend_i32_u (local.get $rn)))
    (global.set $qmax (i64.sub (i64.shl (i64.const 1) (i64.extend_i32_u (local.get $f))) (i64.const 1)))
    (global.set $qmin (i64.sub (i64.const 0) (i64.shl (i64.const 1) (i64.extend_i32_u (local.get $f))))))

  (func $sat (param $v i64) (result i64)
    (if (i64.gt_s (local.get $v) (global.get $qmax))
      (then (global.set $sat (i32.add (global.get $sat) (i32.const 1))) (return (global.get $qmax))))
    (if (i64.lt_s (local.get $v) (global.get $qmin))
      (then (global.set $sat (i32.add (global.get $sat) (i32.const 1))) (return (global.get $qmin))))
    (local.get $v))

  ;; the same for a weight store, counted apart (weight clipping is the drift symptom)
  (func $satw (param $v i64) (result i64)
    (if (i64.gt_s (local.get $v) (global.get $qmax))
      (then (global.set $satW (i32.add (global.get $satW) (i32.const 1))) (return (global.get $qmax))))
    (if (i64.lt_s (local.get $v) (global.get $qmin))
      (then (global.set $satW (i32.add (global.get $satW) (i32.const 1))) (return (global.get $qmin))))
    (local.get $v))

  ;; v / 2^s rounded: floor, or floor(v / 2^s + 1/2)
  (func $rnd (param $v i64) (param $s i64) (result i64)
    (i64.shr_s (i64.add (local.get $v)
                        (i64.shr_u (i64.shl (global.get $rn) (local.get $s)) (i64.const 1)))
               (local.get $s)))

  ;; a real sample to the format: scaled, rounded, saturated (counted)
  (func $quant (param $v f64) (result i64)
    (local $s f64)
    (local.set $s (f64.mul (local.get $v) (f64.convert_i64_s (i64.shl (i64.const 1) (global.get $f)))))
    (local.set $s (f64.floor (f64.add (local.get $s) (select (f64.const 0.5) (f64.const 0) (i32.wrap_i64 (global.get $rn))))))
    (if (f64.ne (local.get $s) (local.get $s)) (then (return (i64.const 0))))  ;; NaN never reaches here from the engine
    (if (f64.gt (local.get $s) (f64.convert_i64_s (global.get $qmax)))
      (then (global.set $sat (i32.add (global.get $sat) (i32.const 1))) (return (global.get $qmax))))
    (if (f64.lt (local.get $s) (f64.convert_i64_s (global.get $qmin)))
      (then (global.set $sat (i32.add (global.get $sat) (i32.const 1))) (return (global.get $qmin))))
    (i64.trunc_f64_s (local.get $s)))

  ;; pushes v into an i32 line; returns the new position; $old receives x(n-L), the sample that
  ;; just left the L-sample window
  (global $old (export "g_old") (mut i64) (i64.const 0))
  (func $push32 (param $o i32) (param $pos i32) (param $v i64) (result i32)
    (local $p i32)
    (local.set $p (select (i32.sub (global.get $M) (i32.const 1)) (i32.sub (local.get $pos) (i32.const 1))
                          (i32.eqz (local.get $pos))))
    (i32.store (i32.add (local.get $o) (i32.shl (local.get $p) (i32.const 2))) (i32.wrap_i64 (local.get $v)))
    (i32.store (i32.add (local.get $o) (i32.shl (i32.add (local.get $p) (global.get $M)) (i32.const 2))) (i32.wrap_i64 (local.get $v)))
    (global.set $old (i64.load32_s (i32.add (local.get $o) (i32.shl (i32.add (local.get $p) (global.get $L)) (i32.const 2)))))
    (local.get $p))

  ;; the Q30 energy share of one sample: x^2 (q15) or rnd(x^2 / 2^32) (q31)
  (func $eterm (param $v i64) (result i64)
    (if (result i64) (i64.eq (global.get $f) (i64.const 15))
      (then (i64.mul (local.get $v) (local.get $v)))
      (else (call $rnd (i64.mul (local.get $v) (local.get $v)) (i64.const 32)))))

  ;; exact sum of w[k] line[pos + k] divided by 2^f with rounding (not saturated). For q31 the
  ;; 62-bit products are accumulated split at bit 16, so the sum is exact for any length.
  (func $dotq (param $o i32) (param $pos i32) (result i64)
    (local $k i32) (local $px i32) (local $p i64) (local $hi i64) (local $lo i64) (local $pw i32) (local $end i32)
    (local $acc v128) (local $sum v128)
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 2))))
    (if (i64.eq (global.get $f) (i64.const 15)) (then
      ;; q15: every product is below 2^30 in magnitude, so i32x4.mul forms four of them exactly,
      ;; summed widened to i64 (integer sums are exact in any order: the scalar sum bit for bit).
      ;; Four taps a step, then the tail one by one.
      (local.set $pw (global.get $oW))
      (local.set $end (i32.add (global.get $oW) (i32.shl (i32.and (global.get $L) (i32.const -4)) (i32.const 2))))
      (block $done4 (loop $l4
        (br_if $done4 (i32.ge_u (local.get $pw) (local.get $end)))
        (local.set $acc (i32x4.mul (v128.load (local.get $pw)) (v128.load (local.get $px))))
        (local.set $sum (i64x2.add (local.get $sum) (i64x2.add (i64x2.extend_low_i32x4_s (local.get $acc)) (i64x2.extend_high_i32x4_s (local.get $acc)))))
        (local.set $pw (i32.add (local.get $pw) (i32.const 16)))
        (local.set $px (i32.add (local.get $px) (i32.const 16)))
        (br $l4)))
      (local.set $hi (i64.add (i64x2.extract_lane 0 (local.get $sum)) (i64x2.extract_lane 1 (local.get $sum))))
      (local.set $end (i32.add (global.get $oW) (i32.shl (global.get $L) (i32.const 2))))
      (block $done (loop $l
        (br_if $done (i32.ge_u (local.get $pw) (local.get $end)))
        (local.set $hi (i64.add (local.get $hi)
          (i64.extend_i32_s (i32.mul (i32.load (local.get $pw)) (i32.load (local.get $px))))))
        (local.set $pw (i32.add (local.get $pw) (i32.const 4)))
        (local.set $px (i32.add (local.get $px) (i32.const 4)))
        (br $l)))
      (return (call $rnd (local.get $hi) (i64.const 15)))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $p (i64.mul (i64.load32_s (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))
                             (i64.load32_s (i32.add (local.get $px) (i32.shl (local.get $k) (i32.const 2))))))
      (local.set $hi (i64.add (local.get $hi) (i64.shr_s (local.get $p) (i64.const 16))))
      (local.set $lo (i64.add (local.get $lo) (i64.and (local.get $p) (i64.const 0xffff))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    (call $combine (local.get $hi) (local.get $lo)))

  ;; floor((hi 2^16 + lo + half) / 2^f) for f = 15 or 31, lo >= 0
  (func $combine (param $hi i64) (param $lo i64) (result i64)
    (local $t i64)
    (if (result i64) (i64.eq (global.get $f) (i64.const 15))
      (then (call $rnd (i64.add (i64.shl (local.get $hi) (i64.const 16)) (local.get $lo)) (i64.const 15)))
      (else
        (local.set $t (i64.add (local.get $lo) (i64.mul (global.get $rn) (i64.const 0x40000000))))
        (i64.shr_s (i64.add (local.get $hi) (i64.shr_s (local.get $t) (i64.const 16))) (i64.const 15)))))

  ;; applies the pending update w <- sat(w + rnd(g x) - rnd(lf w) - (w >> k)) over line $o at $pos
  (func $updateq (param $o i32) (param $pos i32) (param $shift i64)
    (local $k i32) (local $a i32) (local $px i32) (local $w i64) (local $v i64) (local $f i64)
    (local $half i64) (local $g i64) (local $lf i64)
    (local.set $f (global.get $f))
    (local.set $half (i64.shr_u (i64.shl (global.get $rn) (local.get $f)) (i64.const 1)))
    (local.set $g (global.get $qg))
    (local.set $lf (global.get $qlf))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 2))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))
      (local.set $w (i64.load32_s (local.get $a)))
      (local.set $v (i64.add (local.get $w)
        (i64.shr_s (i64.add (i64.mul (local.get $g) (i64.load32_s (i32.add (local.get $px) (i32.shl (local.get $k) (i32.const 2)))))
                            (local.get $half))
                   (local.get $f))))
      (local.set $v (i64.sub (local.get $v)
        (i64.shr_s (i64.add (i64.mul (local.get $lf) (local.get $w)) (local.get $half)) (local.get $f))))
      (if (i64.ge_s (local.get $shift) (i64.const 0))
        (then (local.set $v (i64.sub (local.get $v) (i64.shr_s (local.get $w) (local.get $shift))))))
      (i32.store (local.get $a) (i32.wrap_i64 (call $satw (local.get $v))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l))))


  ;; The fixed-point fused pass without noise: update with x(n-1) = line[pos + 1 + k], then the
  ;; exact sum with x(n) = line[pos + k]. Saturation is branch-free and counted locally. $full
  ;; enables the leak and shift terms. Returns the rounded (unsaturated) sum.
  (func $fusedq (param $o i32) (param $pos i32) (param $g i64) (param $lf i64) (param $sh i64) (param $full i32) (result i64)
    (local $px i32) (local $pw i32) (local $end i32) (local $w i64) (local $v i64) (local $p i64)
    (local $hi i64) (local $lo i64) (local $half i64) (local $f i64) (local $max i64) (local $min i64)
    (local $cnt i32) (local $c1 i32) (local $c2 i32) (local $q15 i32) (local $mask i64)
    (local $vg v128) (local $vlf v128) (local $vhalf v128) (local $vmask v128) (local $vmax v128) (local $vmin v128)
    (local $vw v128) (local $vv v128) (local $vp v128) (local $vsum v128) (local $vcnt v128) (local $sh32 i32)
    (local.set $f (global.get $f))
    (local.set $half (i64.shr_u (i64.shl (global.get $rn) (local.get $f)) (i64.const 1)))
    (local.set $max (global.get $qmax))
    (local.set $min (global.get $qmin))
    (local.set $q15 (i64.eq (local.get $f) (i64.const 15)))
    (local.set $mask (select (i64.const -1) (i64.const 0) (i64.ge_s (local.get $sh) (i64.const 0))))
    (if (i64.lt_s (local.get $sh) (i64.const 0)) (then (local.set $sh (i64.const 0))))
    (local.set $px (i32.add (local.get $o) (i32.shl (local.get $pos) (i32.const 2))))
    (local.set $pw (global.get $oW))
    (if (local.get $q15) (then
      ;; q15, four taps a step in i32x4: every term fits 32 bits (|g x|, |lf w| <= 2^30, |v| < 2^31)
      ;; and integer arithmetic is exact, so each lane is the scalar sequence below bit for bit;
      ;; with no leak, lf = 0 and the mask clear the leak terms to exactly 0. Saturations are
      ;; counted per lane (a compare is -1 where it holds), the products summed widened to i64.
      (local.set $end (i32.add (global.get $oW) (i32.shl (i32.and (global.get $L) (i32.const -4)) (i32.const 2))))
      (local.set $vg (i32x4.splat (i32.wrap_i64 (local.get $g))))
      (local.set $vlf (i32x4.splat (i32.wrap_i64 (local.get $lf))))
      (local.set $vhalf (i32x4.splat (i32.wrap_i64 (local.get $half))))
      (local.set $vmask (i32x4.splat (i32.wrap_i64 (local.get $mask))))
      (local.set $vmax (i32x4.splat (i32.wrap_i64 (local.get $max))))
      (local.set $vmin (i32x4.splat (i32.wrap_i64 (local.get $min))))
      (local.set $sh32 (i32.wrap_i64 (local.get $sh)))
      (block $done4 (loop $l4
        (br_if $done4 (i32.ge_u (local.get $pw) (local.get $end)))
        (local.set $vw (v128.load (local.get $pw)))
        (local.set $vv (i32x4.add (local.get $vw)
          (i32x4.shr_s (i32x4.add (i32x4.mul (local.get $vg) (v128.load offset=4 (local.get $px))) (local.get $vhalf)) (i32.const 15))))
        (local.set $vv (i32x4.sub (i32x4.sub (local.get $vv)
            (i32x4.shr_s (i32x4.add (i32x4.mul (local.get $vlf) (local.get $vw)) (local.get $vhalf)) (i32.const 15)))
          (v128.and (i32x4.shr_s (local.get $vw) (local.get $sh32)) (local.get $vmask))))
        (local.set $vcnt (i32x4.sub (i32x4.sub (local.get $vcnt) (i32x4.gt_s (local.get $vv) (local.get $vmax))) (i32x4.lt_s (local.get $vv) (local.get $vmin))))
        (local.set $vv (i32x4.max_s (i32x4.min_s (local.get $vv) (local.get $vmax)) (local.get $vmin)))
        (v128.store (local.get $pw) (local.get $vv))
        (local.set $vp (i32x4.mul (local.get $vv) (v128.load (local.get $px))))
        (local.set $vsum (i64x2.add (local.get $vsum) (i64x2.add (i64x2.extend_low_i32x4_s (local.get $vp)) (i64x2.extend_high_i32x4_s (local.get $vp)))))
        (local.set $pw (i32.add (local.get $pw) (i32.const 16)))
        (local.set $px (i32.add (local.get $px) (i32.const 16)))
        (br $l4)))
      (local.set $hi (i64.add (i64x2.extract_lane 0 (local.get $vsum)) (i64x2.extract_lane 1 (local.get $vsum))))
      (local.set $cnt (i32.add (i32.add (i32x4.extract_lane 0 (local.get $vcnt)) (i32x4.extract_lane 1 (local.get $vcnt)))
                               (i32.add (i32x4.extract_lane 2 (local.get $vcnt)) (i32x4.extract_lane 3 (local.get $vcnt)))))))
    ;; The taps left (q15: the last L mod 4; q31: all of them), one by one.
    (local.set $end (i32.add (global.get $oW) (i32.shl (global.get $L) (i32.const 2))))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $pw) (local.get $end)))
      (local.set $w (i64.load32_s (local.get $pw)))
      (local.set $v (i64.add (local.get $w)
        (i64.shr_s (i64.add (i64.mul (local.get $g) (i64.load32_s offset=4 (local.get $px))) (local.get $half)) (local.get $f))))
      (if (local.get $full) (then
        (local.set $v (i64.sub (i64.sub (local.get $v)
            (i64.shr_s (i64.add (i64.mul (local.get $lf) (local.get $w)) (local.get $half)) (local.get $f)))
          (i64.and (i64.shr_s (local.get $w) (local.get $sh)) (local.get $mask))))))
      (local.set $c1 (i64.gt_s (local.get $v) (local.get $max)))
      (local.set $c2 (i64.lt_s (local.get $v) (local.get $min)))
      (local.set $v (select (local.get $max) (select (local.get $min) (local.get $v) (local.get $c2)) (local.get $c1)))
      (local.set $cnt (i32.add (local.get $cnt) (i32.add (local.get $c1) (local.get $c2))))
      (i32.store (local.get $pw) (i32.wrap_i64 (local.get $v)))
      (local.set $p (i64.mul (local.get $v) (i64.load32_s (local.get $px))))
      (if (local.get $q15)
        (then (local.set $hi (i64.add (local.get $hi) (local.get $p))))
        (else
          (local.set $hi (i64.add (local.get $hi) (i64.shr_s (local.get $p) (i64.const 16))))
          (local.set $lo (i64.add (local.get $lo) (i64.and (local.get $p) (i64.const 0xffff))))))
      (local.set $pw (i32.add (local.get $pw) (i32.const 4)))
      (local.set $px (i32.add (local.get $px) (i32.const 4)))
      (br $l)))
    (global.set $satW (i32.add (global.get $satW) (local.get $cnt)))
    (if (result i64) (local.get $q15)
      (then (call $rnd (local.get $hi) (i64.const 15)))
      (else (call $combine (local.get $hi) (local.get $lo)))))

  ;; Weight-mean removal (fixed point): m = rnd_div(sum_k W[k], L), W[k] <- sat(W[k] - m). The
  ;; division rounds like the reference's divRound: floor, or floor(sum / L + 1/2).
  (func $removeMeanQ
    (local $k i32) (local $a i32) (local $sum i64) (local $num i64) (local $den i64) (local $m i64)
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $sum (i64.add (local.get $sum) (i64.load32_s (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l)))
    ;; nearest: floor((2 sum + L) / 2L); truncate: floor(sum / L)
    (local.set $den (i64.extend_i32_u (global.get $L)))
    (local.set $num (local.get $sum))
    (if (i64.ne (global.get $rn) (i64.const 0)) (then
      (local.set $num (i64.add (i64.shl (local.get $sum) (i64.const 1)) (local.get $den)))
      (local.set $den (i64.shl (local.get $den) (i64.const 1)))))
    (local.set $m (i64.div_s (local.get $num) (local.get $den)))
    (if (i32.and (i64.lt_s (local.get $num) (i64.const 0)) (i64.ne (i64.rem_s (local.get $num) (local.get $den)) (i64.const 0)))
      (then (local.set $m (i64.sub (local.get $m) (i64.const 1)))))
    (local.set $k (i32.const 0))
    (block $done (loop $l
      (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
      (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))
      (i32.store (local.get $a) (i32.wrap_i64 (call $satw (i64.sub (i64.load32_s (local.get $a)) (local.get $m)))))
      (local.set $k (i32.add (local.get $k) (i32.const 1)))
      (br $l))))

  (func (export "qFlush") (param $noise i32) (param $shift i32) (call $flushq (local.get $noise) (local.get $shift)))
  (func $flushq (param $noise i32) (param $shift i32)
    (if (global.get $pend) (then
      (if (local.get $noise)
        (then (call $updateq (global.get $oLA) (global.get $posA) (i64.extend_i32_s (local.get $shift))))
        (else (call $updateq (global.get $oLE) (global.get $posE) (i64.extend_i32_s (local.get $shift)))))
      (global.set $pend (i32.const 0)))))

  ;; n samples of the fixed-point adaptive path. flags: 1 nlms, 2 noise, 4 adapting.
  ;; $shift is leakShift or -1. muQ is the Q16 step, deltaQ the Q30 regularization, lfQ the Qf
  ;; per-sample leak factor rnd_16(muQ gammaQ).
  (func (export "qRun") (param $n i32) (param $flags i32) (param $muQ i64) (param $deltaQ i64)
        (param $lfQ i64) (param $shift i32)
    (local $i i32) (local $i8 i32) (local $k i32) (local $a i32)
    (local $xq i64) (local $dq i64) (local $xa i64) (local $noise i32) (local $oU i32) (local $posU i32)
    (local $pxo i32) (local $pxe i32) (local $pxa i32)
    (local $w i64) (local $v i64) (local $p i64) (local $hiE i64) (local $loE i64) (local $hiA i64) (local $loA i64)
    (local $yE i64) (local $eE i64) (local $err i64) (local $s i64) (local $f i64) (local $half i64)
    (local $g i64) (local $lf i64) (local $sh i64) (local $scale f64)
    (local.set $noise (i32.and (local.get $flags) (i32.const 2)))
    (local.set $sh (i64.extend_i32_s (local.get $shift)))
    (local.set $f (global.get $f))
    (local.set $half (i64.shr_u (i64.shl (global.get $rn) (local.get $f)) (i64.const 1)))
    (local.set $scale (f64.div (f64.const 1) (f64.convert_i64_s (i64.shl (i64.const 1) (local.get $f)))))
    (block $end (loop $sample
      (br_if $end (i32.ge_u (local.get $i) (local.get $n)))
      (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
      (local.set $xq (call $quant (f64.load (i32.add (global.get $oX) (local.get $i8)))))
      (local.set $dq (call $quant (f64.load (i32.add (global.get $oD) (local.get $i8)))))
      (global.set $posE (call $push32 (global.get $oLE) (global.get $posE) (local.get $xq)))
      (local.set $xa (local.get $xq))
      (if (local.get $noise) (then
        (local.set $xa (call $sat (i64.add (local.get $xq) (call $quant (f64.load (i32.add (global.get $oN) (local.get $i8)))))))
        (global.set $posA (call $push32 (global.get $oLA) (global.get $posA) (local.get $xa)))))
      (global.set $energy (i64.sub (i64.add (global.get $energy) (call $eterm (local.get $xa))) (call $eterm (global.get $old))))
      (local.set $oU (select (global.get $oLA) (global.get $oLE) (local.get $noise)))
      (local.set $posU (select (global.get $posA) (global.get $posE) (local.get $noise)))
      (local.set $pxe (i32.add (global.get $oLE) (i32.shl (global.get $posE) (i32.const 2))))
      (local.set $pxa (i32.add (local.get $oU) (i32.shl (local.get $posU) (i32.const 2))))
      (local.set $pxo (i32.add (local.get $pxa) (i32.const 4)))
      (local.set $hiE (i64.const 0)) (local.set $loE (i64.const 0))
      (local.set $hiA (i64.const 0)) (local.set $loA (i64.const 0))
      (local.set $k (i32.const 0))
      (if (i32.and (global.get $pend) (i32.eqz (local.get $noise)))
        (then
          (local.set $yE (call $fusedq (global.get $oLE) (global.get $posE) (global.get $qg) (global.get $qlf) (local.get $sh)
            (i32.or (i64.ne (global.get $qlf) (i64.const 0)) (i64.ge_s (local.get $sh) (i64.const 0)))))
          (global.set $pend (i32.const 0)))
      (else (if (global.get $pend)
        (then
          (local.set $g (global.get $qg))
          (local.set $lf (global.get $qlf))
          (block $done (loop $l
            (br_if $done (i32.ge_u (local.get $k) (global.get $L)))
            (local.set $a (i32.add (global.get $oW) (i32.shl (local.get $k) (i32.const 2))))
            (local.set $w (i64.load32_s (local.get $a)))
            (local.set $v (i64.add (local.get $w)
              (i64.shr_s (i64.add (i64.mul (local.get $g) (i64.load32_s (i32.add (local.get $pxo) (i32.shl (local.get $k) (i32.const 2)))))
                                  (local.get $half))
                         (local.get $f))))
            (local.set $v (i64.sub (local.get $v)
              (i64.shr_s (i64.add (i64.mul (local.get $lf) (local.get $w)) (local.get $half)) (local.get $f))))
            (if (i64.ge_s (local.get $sh) (i64.const 0))
              (then (local.set $v (i64.sub (local.get $v) (i64.shr_s (local.get $w) (local.get $sh))))))
            (local.set $v (call $satw (local.get $v)))
            (i32.store (local.get $a) (i32.wrap_i64 (local.get $v)))
            (local.set $p (i64.mul (local.get $v) (i64.load32_s (i32.add (local.get $pxe) (i32.shl (local.get $k) (i32.const 2))))))
            (local.set $hiE (i64.add (local.get $hiE) (i64.shr_s (local.get $p) (i64.const 16))))
            (local.set $loE (i64.add (local.get $loE) (i64.and (local.get $p) (i64.const 0xffff))))
            (if (local.get $noise) (then
              (local.set $p (i64.mul (local.get $v) (i64.load32_s (i32.add (local.get $pxa) (i32.shl (local.get $k) (i32.const 2))))))
              (local.set $hiA (i64.add (local.get $hiA) (i64.shr_s (local.get $p) (i64.const 16))))
              (local.set $loA (i64.add (local.get $loA) (i64.and (local.get $p) (i64.const 0xffff))))))
            (local.set $k (i32.add (local.get $k) (i32.const 1)))
            (br $l)))
          (global.set $pend (i32.const 0))
          (local.set $yE (call $combine (local.get $hiE) (local.get $loE)))
          (if (local.get $noise) (then (local.set $err (call $combine (local.get $hiA) (local.get $loA))))))
        (else
          (local.set $yE (call $dotq (global.get $oLE) (global.get $posE)))
          (if (local.get $noise) (then (local.set $err (call $dotq (local.get $oU) (local.get $posU)))))))))
      (local.set $yE (call $sat (local.get $yE)))
      (local.set $eE (call $sat (i64.sub (local.get $dq) (local.get $yE))))
      (f64.store (i32.add (global.get $oY) (local.get $i8)) (f64.mul (f64.convert_i64_s (local.get $yE)) (local.get $scale)))
      (f64.store (i32.add (global.get $oE) (local.get $i8)) (f64.mul (f64.convert_i64_s (local.get $eE)) (local.get $scale)))
      (if (i32.and (local.get $flags) (i32.const 4)) (then
        ;; with noise, $err holds the adaptation line's filter sum until here
        (if (local.get $noise)
          (then (local.set $err (call $sat (i64.sub (local.get $dq) (call $sat (local.get $err))))))
          (else (local.set $err (local.get $eE))))
        (local.set $s (local.get $muQ))
        (if (i32.and (local.get $flags) (i32.const 1)) (then
          (local.set $s (i64.trunc_f64_s (f64.floor (f64.add
            (f64.div (f64.convert_i64_s (i64.shl (local.get $muQ) (i64.const 30)))
                     (f64.convert_i64_s (i64.add (local.get $deltaQ) (global.get $energy))))
            (select (f64.const 0.5) (f64.const 0) (i32.wrap_i64 (global.get $rn)))))))
          (if (i64.gt_s (local.get $s) (i64.const 2147483647)) (then (local.set $s (i64.const 2147483647))))))
        (global.set $qg (call $sat (call $rnd (i64.mul (local.get $s) (local.get $err)) (i64.const 16))))
        (global.set $qlf (local.get $lfQ))
        (global.set $pend (i32.const 1))
        (if (global.get $mrEvery) (then
          (global.set $mrCount (i32.add (global.get $mrCount) (i32.const 1)))
          (if (i32.ge_u (global.get $mrCount) (global.get $mrEvery)) (then
            (global.set $mrCount (i32.const 0))
            (call $flushq (local.get $noise) (local.get $shift))
            (call $removeMeanQ)))))))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $sample))))

  ;; n samples of a fixed-weight fixed-point FIR: y = sat(rnd(w . x)), e = sat(q(d) - y).
  (func (export "qFir") (param $n i32)
    (local $i i32) (local $i8 i32) (local $y i64) (local $scale f64)
    (local.set $scale (f64.div (f64.const 1) (f64.convert_i64_s (i64.shl (i64.const 1) (global.get $f)))))
    (block $end (loop $sample
      (br_if $end (i32.ge_u (local.get $i) (local.get $n)))
      (local.set $i8 (i32.shl (local.get $i) (i32.const 3)))
      (global.set $posE (call $push32 (global.get $oLE) (global.get $posE) (call $quant (f64.load (i32.add (global.get $oX) (local.get $i8))))))
      (local.set $y (call $sat (call $dotq (global.get $oLE) (global.get $posE))))
      (f64.store (i32.add (global.get $oY) (local.get $i8)) (f64.mul (f64.convert_i64_s (local.get $y)) (local.get $scale)))
      (f64.store (i32.add (global.get $oE) (local.get $i8))
        (f64.mul (f64.convert_i64_s (call $sat (i64.sub (call $quant (f64.load (i32.add (global.get $oD) (local.get $i8)))) (local.get $y))))
                 (local.get $scale)))
      (local.set $i (i32.add (local.get $i) (i32.const 1)))
      (br $sample))))
)
