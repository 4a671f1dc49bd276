#!/usr/bin/env python3
"""The per-sample numpy dual-path NLMS many engineers would write instead of tapwarden: one
numpy call per operation per sample. Usage: numpy_nlms.py TAPS SECONDS RATE -> one JSON line."""
import json
import sys
import time

import numpy as np

L, seconds, rate = int(sys.argv[1]), float(sys.argv[2]), int(sys.argv[3])
n = int(seconds * rate)
rng = np.random.default_rng(1)
x = rng.uniform(-0.5, 0.5, n)
d = 0.3 * x + 0.001 * rng.uniform(-0.5, 0.5, n)
w = np.zeros(L)
wc = rng.uniform(-0.005, 0.005, L)
buf = np.zeros(L)
out = np.zeros(n)
outc = np.zeros(n)
t0 = time.perf_counter()
for i in range(n):
    buf[1:] = buf[:-1]
    buf[0] = x[i]
    e = d[i] - w @ buf
    w += (0.5 * e / (1e-6 + buf @ buf)) * buf
    out[i] = e
    outc[i] = d[i] - wc @ buf
elapsed = time.perf_counter() - t0
print(json.dumps({"taps": L, "samples": n, "seconds": elapsed, "samplesPerSecond": n / elapsed,
                  "realtimeFactor": n / elapsed / rate}))
