"""Side by side: a numba kernel of the Kepler solve against the numpy one (not part of the suite).

numba is not a dependency of orbitmass; this probe decides whether a compiled
kernel would be worth one. It compiles a scalar loop of the same Markley (1995)
starter and fifth-order correction as :mod:`orbitmass.core.kepler` (cos E and
sin E by the angle-addition step) and times it against
:func:`orbitmass.core.kepler.kepler_cos_sin_rows` on a 64 x 180 block (64
parameter sets, 90 positions + 90 velocities), process CPU time, with the
import and compile time reported. Usage (with numba installed)::

    python benchmarks/numba_probe.py
"""

import math
import time

import numpy as np

t_start = time.perf_counter()
import numba  # noqa: E402
from numba import njit  # noqa: E402

ALPHA0 = 3.0 * math.pi**2 / (math.pi**2 - 6.0)
ALPHA1 = 1.6 * math.pi / (math.pi**2 - 6.0)


@njit(cache=False, fastmath=False)
def kepler_cs(mean, ecc, out_c, out_s):
    n, m = mean.shape
    for i in range(n):
        e = ecc[i, 0]
        for j in range(m):
            M = mean[i, j]
            red = M - 2 * math.pi * np.rint(M / (2 * math.pi))
            mm = abs(red)
            ome = 1.0 - e
            alpha = ALPHA0 + ALPHA1 / (1.0 + e) * (math.pi - mm)
            d = 3.0 * ome + alpha * e
            ad = alpha * d
            q = 2.0 * ad * ome - mm * mm
            r = 3.0 * ad * (d - ome) * mm + mm * mm * mm
            w = (r + math.sqrt(q * q * q + r * r)) ** (1.0 / 3.0)
            w = w * w
            e1 = (2.0 * r * w / (w * w + w * q + q * q) + mm) / d
            tn = math.tan(0.5 * e1)
            c1 = 2.0 / (1.0 + tn * tn)
            s1 = tn * c1
            c1 = c1 - 1.0
            es = e * s1
            ec = e * c1
            f0 = e1 - es - mm
            f1 = 1.0 - ec
            es *= 0.5
            ec /= 6.0
            t = f0 / (f1 - f0 * es / f1)
            t = f0 / (f1 - t * (es - t * ec))
            t = f0 / (f1 - t * (es - t * (ec + t * es / 12.0)))
            t2 = t * t
            cs = 1.0 + t2 * (t2 / 24.0 - 0.5)
            ss = t * (1.0 + t2 * (t2 / 120.0 - 1.0 / 6.0))
            out_c[i, j] = c1 * cs + s1 * ss
            sv = s1 * cs - c1 * ss
            out_s[i, j] = sv if red >= 0 else -sv


t0 = time.perf_counter()
rng = np.random.default_rng(1)
mean = rng.uniform(-10, 10, (64, 180))
ecc = rng.uniform(0, 0.95, (64, 1))
c = np.empty_like(mean)
s = np.empty_like(mean)
kepler_cs(mean, ecc, c, s)
compile_s = time.perf_counter() - t0
from orbitmass.core.kepler import kepler_cos_sin_rows, rows_work  # noqa: E402

c2 = np.empty_like(mean)
s2 = np.empty_like(mean)
w = rows_work(64, 180)
kepler_cos_sin_rows(mean, ecc, c2, s2, w)
print("numba", numba.__version__, "import+compile s", round(time.perf_counter() - t_start, 2),  # noqa: T201
      "compile", round(compile_s, 2))
print("max diff cos", np.max(np.abs(c - c2)), "sin", np.max(np.abs(s - s2)))


def timeit(f, n=3000):
    """Process CPU time per call (us)."""
    f()
    t = time.process_time()
    for _ in range(n):
        f()
    return (time.process_time() - t) / n * 1e6


tn = timeit(lambda: kepler_cs(mean, ecc, c, s))
tp = timeit(lambda: kepler_cos_sin_rows(mean, ecc, c2, s2, w))
print(f"64x180 Kepler cos/sin: numba {tn:.1f} us, numpy {tp:.1f} us per call; per set {tn/64:.2f} vs {tp/64:.2f} us")
