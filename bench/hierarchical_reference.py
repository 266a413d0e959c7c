# SPDX-License-Identifier: MIT
"""The numpy/scipy reference of the hierarchical likelihood's per-star pieces, shared by
bench/compare_hierarchical.py (one relation) and bench/compare_joint_hierarchical.py (the
joint fit): the smooth-histogram distance prior, the magnitude terms, one mixture
component's integral over the latent distance modulus, the BFGS solve and the timed
bootstrap resamples. Written from lib/rungcal/plfit/hierarchical.hpp, distance_prior.hpp and
blend_density.hpp, not from their code.

The mu integral is Gauss-Hermite quadrature (numpy's hermgauss) centred on each star's
mode, found by safeguarded Newton steps, with the curvature there as the width (a smooth
maximum of the exact curvature and a fifth of its Fisher part, so the width, and -ln L,
are smooth in the parameters).
"""
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
from numpy.polynomial.hermite import hermgauss
from scipy.optimize import minimize
from scipy.special import erfcx, log_ndtr

def run_bench(program, default_resamples, default_scipy_resamples):
    """Runs build/bench/<program> as the command line says ([build-dir] [rungcal-resamples]
    [scipy-resamples]). Returns its output's lines split in words, the CSV it wrote as
    columns, and the count of scipy resamples."""
    build = sys.argv[1] if len(sys.argv) > 1 else "build"
    resamples = int(sys.argv[2]) if len(sys.argv) > 2 else default_resamples
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "stars.csv")
        out = subprocess.run([os.path.join(build, "bench", program), str(resamples), path],
                             check=True, capture_output=True, text=True).stdout
        columns = np.loadtxt(path, delimiter=",", comments="#").T
    return ([line.split() for line in out.splitlines()], columns,
            int(sys.argv[3]) if len(sys.argv) > 3 else default_scipy_resamples)


KC = 0.2 * np.log(10.0)  # -d ln(parallax) / d mu
LOG2PI = np.log(2.0 * np.pi)


def rule(n):
    """Gauss-Hermite nodes scaled by sqrt 2, and ln w_k + x_k^2."""
    x, w = hermgauss(n)
    return np.sqrt(2.0) * x, np.log(w) + x ** 2


def prior(mu, c0, step, logw, curvature=True):
    """The smooth histogram p(mu) = sum_j w_j N(mu | c0 + j step, step^2) (Bovy, Hogg & Roweis
    2011) over all bins: ln p(mu) and each bin's responsibility; with curvature also
    d ln p / dmu and d2 ln p / dmu2 (for the mode search), without it d ln p / dmu last."""
    d = np.arange(len(logw), dtype=float) - ((mu - c0) / step)[..., None]
    a = d * d
    a *= -0.5
    a += logw
    top = a.max(-1, keepdims=True)
    a -= top
    r = np.exp(a, out=a)
    tot = r.sum(-1)
    r /= tot[..., None]
    logp = top[..., 0] + np.log(tot) - np.log(step) - 0.5 * LOG2PI
    first = (r * d).sum(-1)
    if not curvature:
        return logp, r, first / step
    second = (r * (d * d - 1.0)).sum(-1)
    return logp, first / step, (second - first * first) / (step * step), r


def gaussian(r, V, s):
    """N(r | 0, V), the member's and the outlier's magnitude term: ln p, d/dr, d2/dr2, d/dV
    and d/ds (none: s is the blend's)."""
    return (-0.5 * (LOG2PI + np.log(V)) - 0.5 * r * r / V, -r / V, -1.0 / V + 0.0 * r,
            0.5 * (r * r / V - 1.0) / V, 0.0)


def rising_blend(r, V, s):
    """The rising blend's magnitude term: N(0, V) convolved with a Gamma(2, mean s)
    brightening, in closed form
        p(r) = lambda^2 sqrt(V) exp(lambda r + lambda^2 V / 2) [phi(z) + z Phi(z)],
        lambda = 2 / s, z = -(r + lambda V) / sqrt(V),
    with g(z) = ln(phi + z Phi): g' = 1/A, g'' = -B/A^2, A = z + phi/Phi, B = 1 - (phi/Phi) A.
    Below z = -5, A comes from the scaled complementary error function (Phi/phi =
    sqrt(pi/2) erfcx(-z/sqrt 2)) rather than from a difference of nearly equal terms."""
    lam, sd = 2.0 / s, np.sqrt(V)
    z = -(r + lam * V) / sd
    tail = z < -5.0
    zt = np.where(tail, z, -6.0)
    zc = np.where(tail, 0.0, z)
    mills = np.sqrt(0.5 * np.pi) * erfcx(-zt / np.sqrt(2.0))
    log_cdf = np.where(tail, -0.5 * z * z - 0.5 * LOG2PI + np.log(mills), log_ndtr(zc))
    psi = np.where(tail, 1.0 / mills, np.exp(-0.5 * zc * zc - 0.5 * LOG2PI - log_ndtr(zc)))
    A = np.where(tail, (1.0 + zt * mills) / mills, zc + psi)
    B = 1.0 - psi * A
    logp = 2.0 * np.log(lam) + 0.5 * np.log(V) + lam * r + 0.5 * lam * lam * V + log_cdf + np.log(A)
    d_lam = 2.0 / lam + r + lam * V - sd / A
    return (logp, lam - 1.0 / (A * sd), -B / (A * A * V),
            0.5 / V + 0.5 * lam * lam + (-lam / sd - 0.5 * z / V) / A, -0.5 * lam * lam * d_lam)


def component(m, V, s, mag, quad, width_factor, plx, vp, shift, off, c0, step, logw, cache):
    """One mixture component's integral over mu per star,
        int dmu p(mu) mag(m - mu + shift | V, s) N(plx | 10^(-0.2 (mu - 10)) + off, vp),
    m: each star's magnitude less its model; shift: how much brighter the component starts.
    Returns ln of it and, over its normalised integrand, the expectations of d/dm, d/dV and
    d/ds of the magnitude term, d/doff of the parallax term, d ln p / dmu, and
    d ln p / d eta_j (j >= 1). quad: rule(n); width_factor: the width in curvature widths.
    cache: each star's last mode, the next Newton start."""
    nodes, logw_q = quad

    def curvature(i, mu):
        _, d1, d2, _ = prior(mu, c0, step, logw)
        pt = np.exp(-KC * (mu - 10.0))
        e = plx[i] - pt - off
        _, m1, m2, _, _ = mag(m[i] - mu + shift, V[i], s)
        slope = d1 - m1 - e * KC * pt / vp[i]
        fisher = -m2 + KC * KC * pt * pt / vp[i] - np.minimum(d2, 0.0)
        exact = -m2 + KC * KC * pt * (pt - e) / vp[i] - d2
        floor = 0.2 * fisher
        width_h = 0.5 * (exact + floor + np.sqrt((exact - floor) ** 2 + 0.01 * fisher * fisher))
        return np.where(exact > floor, exact, fisher), slope, width_h

    mu = np.where(np.isfinite(cache), cache, m + shift)
    active = np.arange(len(m))
    for _ in range(60):
        h, slope, _ = curvature(active, mu[active])
        move = np.clip(slope / h, -1.0, 1.0)
        mu[active] = np.clip(mu[active] + move, -10.0, 60.0)
        active = active[np.abs(move) >= 1e-10]
        if active.size == 0:
            break
    _, _, width_h = curvature(np.arange(len(m)), mu)
    cache[:] = mu
    width = width_factor / np.sqrt(width_h)
    muk = mu[:, None] + width[:, None] * nodes
    logp, resp, dlogp = prior(muk, c0, step, logw, curvature=False)
    pt = np.exp(-KC * (muk - 10.0))
    lp, d_r, _, d_v, d_s = mag(m[:, None] - muk + shift, V[:, None], s)
    e = plx[:, None] - pt - off
    terms = logw_q + logp + lp - 0.5 * e * e / vp[:, None]
    top = terms.max(1)
    q = np.exp(terms - top[:, None])
    tot = q.sum(1)
    q /= tot[:, None]
    log_l = np.log(np.sqrt(2.0) * width) + top + np.log(tot) - 0.5 * (LOG2PI + np.log(vp))
    d_eta = np.einsum("nk,nkb->nb", q, resp)[:, 1:] - np.exp(logw[1:])
    d_s = (q * d_s).sum(1) if np.ndim(d_s) else 0.0
    return log_l, (q * d_r).sum(1), (q * d_v).sum(1), d_s, (q * e).sum(1) / vp, (q * dlogp).sum(1), d_eta


def bfgs(f, x0, gtol):
    """Dense BFGS, as rungcal's solver (L-BFGS-B crawls here: the offset's curvature is ~1e7
    times the log-weights'); gtol on the largest gradient component."""
    return minimize(f, x0, jac=True, method="BFGS", options=dict(gtol=gtol, norm=np.inf, maxiter=5000))


def time_resamples(n_stars, resamples, solve, seed=1):
    """Bootstrap resamples as rungcal's: stars drawn with replacement, a repeated star kept
    once with its count as weight. solve(rows, weights, rng) builds the likelihood and solves
    it, returning (evaluations, iterations); the building is timed with the solve. Returns the
    seconds, evaluations and iterations per resample."""
    rng = np.random.default_rng(seed)
    times, evals, iters = [], [], []
    for _ in range(resamples):
        counts = np.bincount(rng.integers(0, n_stars, n_stars), minlength=n_stars)
        rows = np.nonzero(counts)[0]
        t0 = time.perf_counter()
        e, i = solve(rows, counts[rows].astype(float), rng)
        times.append(time.perf_counter() - t0)
        evals.append(e)
        iters.append(i)
    return times, evals, iters


def report_times(info, times, evals, iters, numpy_eval_ms, bootstrap, sample, target=""):
    """Prints scipy's resamples (time_resamples) beside rungcal's bootstrap, read from the
    bench's output `info` (key -> lists of words), and their ratio per core."""
    get = lambda key: float(info[key][0][0])
    scipy_ms, ours = 1e3 * np.mean(times), get("rungcal_ms_per_resample")
    width = len(bootstrap) + 1
    print(f"{'scipy BFGS:':{width}s} {scipy_ms:.1f} ms per resample (1 core, {len(times)} resamples, "
          f"{np.mean(iters):.0f} iterations / {np.mean(evals):.0f} evaluations each; "
          f"{', '.join(f'{1e3 * t:.0f}' for t in times)} ms)")
    print(f"{bootstrap}: {ours:.1f} ms per resample ({info['rungcal_threads'][0][0]} thread, "
          f"{int(get('rungcal_resamples'))} resamples, {int(get('bootstrap_failed'))} failed; "
          f"{get('direct_iterations_per_resample'):.0f} iterations and "
          f"{get('direct_ms_per_resample'):.0f} ms each in {len(info['direct_resample'])} direct solves)")
    print(f"one evaluation of -ln L and gradient, {sample}, cold mode search: rungcal "
          f"{get('rungcal_ms_per_evaluation'):.1f} ms, numpy {numpy_eval_ms:.1f} ms")
    print(f"ratio scipy / rungcal per core: {scipy_ms / ours:.2f}x{target}")
