#!/usr/bin/python3
# SPDX-License-Identifier: MIT
"""Times rungcal's bootstrap resamples against scipy.optimize.least_squares(loss='huber')
on the same simulated 3000-star parallax sample, checks both land on the same optimum
(1e-6 relative) and prints the speed ratio. Run with Debian's Python:
    /usr/bin/python3 bench/compare_fit.py [build-dir]
"""
import subprocess, sys, tempfile, time, os
import numpy as np
from scipy.optimize import least_squares

build = sys.argv[1] if len(sys.argv) > 1 else "build"
stars, resamples = 3000, 400
with tempfile.TemporaryDirectory() as tmp:
    data = os.path.join(tmp, "stars.csv")
    out = subprocess.run([os.path.join(build, "bench", "bench_fit"), str(stars), str(resamples), data],
                         check=True, capture_output=True, text=True).stdout
    info = {line.split()[0]: line.split()[1:] for line in out.splitlines()}
    x, m0, vm, plx, vp = np.loadtxt(data, delimiter=",").T
sigma = float(info["rungcal_sigma"][0])
k = 0.2 * np.log(10)

def fit(idx, start):
    xx, mm, vvm, pp, vvp = x[idx], m0[idx], vm[idx], plx[idx], vp[idx]
    def resid(t):
        pi = np.exp(-k * (mm - t[0] - t[1] * xx - 10))
        return (pp - t[2] - pi) / np.sqrt(vvp + (k * pi) ** 2 * (vvm + sigma ** 2))
    return least_squares(resid, start, loss="huber", f_scale=1.0, method="trf").x

ref = least_squares(
    lambda t: (plx - t[2] - np.exp(-k * (m0 - t[0] - t[1] * x - 10)))
    / np.sqrt(vp + (k * np.exp(-k * (m0 - t[0] - t[1] * x - 10))) ** 2 * (vm + sigma ** 2)),
    [-5.5, -3.0, 0.0], loss="huber", f_scale=1.0, method="trf", ftol=1e-15, xtol=1e-15, gtol=1e-15).x
mine = np.array([float(v) for v in info["rungcal_params"]])
rel = np.max(np.abs(mine / ref - 1))

rng = np.random.default_rng(1)
n_scipy = 200
t0 = time.perf_counter()
for _ in range(n_scipy):
    fit(rng.integers(0, stars, stars), ref)
scipy_ms = (time.perf_counter() - t0) / n_scipy * 1e3
ours = float(info["rungcal_ms_per_resample"][0])
print(f"stars {stars}, parallax space, Huber loss (f_scale 1), scatter fixed")
print(f"full-sample parameters agree to {rel:.1e} relative (target 1e-6)")
print(f"scipy least_squares: {scipy_ms:.3f} ms per resample (1 core)")
print(f"rungcal bootstrap:   {ours:.4f} ms per resample ({info['rungcal_threads'][0]} threads), "
      f"{info['bootstrap_failed'][0]} failed")
print(f"ratio scipy / rungcal: {scipy_ms / ours:.1f}x (target >= 10x)")
