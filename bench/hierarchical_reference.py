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


def read_output(lines):
    """The bench's output: key -> its lines' words, and its parameter lines (name, value,
    mode, d(-ln L)/d(solver coordinate), prior centre, prior width) as names, values, modes,
    gradient, centres and widths."""
    info, rows = {}, []
    for w in lines:
        if w[0] == "param":
            rows.append(w[1:])
        else:
            info.setdefault(w[0], []).append(w[1:])
    values, grad, centre, width = (np.array([float(r[k]) for r in rows]) for k in (1, 3, 4, 5))
    return info, [r[0] for r in rows], values, [r[2] for r in rows], grad, centre, width


class Coordinates:
    """rungcal's solver coordinates: a log scale for the indices `log` (scales, the blend
    ratios), logit for `logit` (fractions), atanh for `atanh` (a correlation), ln(v - 3) for
    `above3` (the outlier's parallax factor), the rest linear; only the parameters whose mode
    is not "fixed" are solved for (free)."""

    def __init__(self, log, logit, atanh, modes, above3=()):
        self.log, self.logit, self.atanh, self.above3 = (np.asarray(a, dtype=int)
                                                         for a in (log, logit, atanh, above3))
        self.free = np.array([j for j, m in enumerate(modes) if m != "fixed"], dtype=int)
        self.prior = np.array([j for j, m in enumerate(modes) if m == "prior"], dtype=int)
        if any(m not in ("free", "fixed", "prior") for m in modes):
            sys.exit(f"unknown parameter modes {set(modes)}")

    def to_internal(self, t):
        x = np.array(t, dtype=float)
        x[self.log] = np.log(x[self.log])
        x[self.logit] = np.log(x[self.logit] / (1.0 - x[self.logit]))
        x[self.atanh] = np.arctanh(x[self.atanh])
        x[self.above3] = np.log(x[self.above3] - 3.0)
        return x

    def to_external(self, x):
        t = np.array(x, dtype=float)
        t[self.log] = np.exp(t[self.log])
        t[self.logit] = 1.0 / (1.0 + np.exp(-t[self.logit]))
        t[self.atanh] = np.tanh(t[self.atanh])
        t[self.above3] = 3.0 + np.exp(t[self.above3])
        return t

    def slope(self, t):
        """d external / d internal."""
        s = np.ones_like(t)
        s[self.log] = t[self.log]
        s[self.logit] = t[self.logit] * (1.0 - t[self.logit])
        s[self.atanh] = 1.0 - t[self.atanh] ** 2
        s[self.above3] = t[self.above3] - 3.0
        return s


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


def coloured_rising_blend(r, V, s, kap, D, tilt):
    """A blend's magnitude term when its brightening b ~ Gamma(2, mean s) moves the reduced
    magnitude by kap b and leaves a colour residual contributing -tilt b - D b^2 / 2 to ln L
    (the joint fit's coloured blends; kap = 1, D = tilt = 0 is the grey rising blend):
        p(r) = lambda^2 int_0^inf b N(r + kap b | 0, V) exp(-(lambda + tilt) b - D b^2 / 2) db,
    lambda = 2 / s. Completing the square in b, with A = kap^2 / V + D, B = kap r / V + lambda
    + tilt and z = -B / sqrt(A), int_0^inf b exp(-A b^2 / 2 - B b) db = (sqrt(2 pi) / A)
    exp(z^2 / 2) [phi(z) + z Phi(z)], so
        ln p = 2 ln lambda - ln V / 2 - ln A - r^2 / (2 V) + z^2 / 2 + ln Phi(z) + ln(z + psi),
    psi = phi / Phi, with r^2 / (2 V) - z^2 / 2 written as one fraction so nothing cancels.
    With F(z) = z^2 / 2 + ln Phi + ln(z + psi): F' = z + psi + Bz / Az, F'' = 1 - Bz / Az^2
    (Az = z + psi, Bz = 1 - psi Az = dAz / dz), and every argument x enters through
    d ln p / dx = (explicit part) + F' dz/dx, dz/dx = -B_x / sqrt(A) - z A_x / (2 A).
    Below z = -5, Az comes from the scaled complementary error function (Phi/phi =
    sqrt(pi/2) erfcx(-z/sqrt 2)) rather than from a difference of nearly equal terms.
    Returns ln p and its derivatives in r (first, second), V, s, kap, D and tilt."""
    lam = 2.0 / s
    lam_t = lam + tilt
    A = kap * kap / V + D
    root = np.sqrt(A)
    z = -(kap * r / V + lam_t) / root
    tail = z < -5.0
    zt = np.where(tail, z, -6.0)
    zc = np.where(tail, 0.0, z)
    mills = np.sqrt(0.5 * np.pi) * erfcx(-zt / np.sqrt(2.0))
    log_cdf = np.where(tail, -0.5 * z * z - 0.5 * LOG2PI + np.log(mills), log_ndtr(zc))
    psi = np.where(tail, 1.0 / mills, np.exp(-0.5 * zc * zc - 0.5 * LOG2PI - log_ndtr(zc)))
    Az = np.where(tail, (1.0 + zt * mills) / mills, zc + psi)
    Bz = 1.0 - psi * Az
    F1 = z + psi + Bz / Az
    F2 = 1.0 - Bz / (Az * Az)
    logp = (2.0 * np.log(lam) - 0.5 * np.log(V) - np.log(A)
            + (2.0 * kap * r * lam_t + lam_t * lam_t * V - D * r * r) / (2.0 * V * A) + log_cdf + np.log(Az))
    z_r = -kap / (V * root)
    z_v = kap * r / (V * V * root) + z * kap * kap / (2.0 * A * V * V)
    d_lam = 2.0 / lam - F1 / root
    return (logp, -r / V + F1 * z_r, -1.0 / V + F2 * z_r * z_r,
            -0.5 / V + 0.5 * r * r / (V * V) + kap * kap / (V * V * A) + F1 * z_v, -0.5 * lam * lam * d_lam,
            -2.0 * kap / (V * A) + F1 * (-r / (V * root) - z * kap / (V * A)),
            -1.0 / A - F1 * z / (2.0 * A), -F1 / root)


def rising_blend(r, V, s):
    """The grey rising blend's magnitude term: N(0, V) convolved with a Gamma(2, mean s)
    brightening, p(r) = lambda^2 sqrt(V) exp(lambda r + lambda^2 V / 2) [phi(z) + z Phi(z)],
    z = -(r + lambda V) / sqrt(V): coloured_rising_blend with kap = 1, D = tilt = 0. Returns
    ln p and its derivatives in r (first, second), V and s."""
    return coloured_rising_blend(r, V, s, 1.0, 0.0, 0.0)[:5]


def component(m, V, s, mag, quad, width_factor, plx, vp, shift, off, c0, step, logw, cache, colour=(),
              power=0):
    """One mixture component's integral over mu per star,
        int dmu p(mu) mag(m - mu + shift | V, s, *colour) N(plx | 10^(-0.2 (mu - 10)) + off, vp),
    m: each star's magnitude less its model; shift: how much brighter the component starts;
    colour: per-star arrays a coloured magnitude term takes after s.
    Returns ln of it and, over its normalised integrand, the expectations of d/dm, d/dV and
    d/ds of the magnitude term, d/doff of the parallax term, d ln p / dmu,
    d ln p / d eta_j (j >= 1), then those of the magnitude term's derivatives in the colour
    arguments, and last that of the parallax term's d/dvp. quad: rule(n); width_factor: the width in curvature widths.
    cache: each star's last mode, the next Newton start.
    power k: the parallax term is (e^2 / vp)^k N(e | 0, vp) / (2k - 1)!! (the outlier
    component's rising law k = 1, quartic k = 2), its factor e^2k on the nodes of the Gaussian
    part's rule."""
    nodes, logw_q = quad

    def curvature(i, mu):
        _, d1, d2, _ = prior(mu, c0, step, logw)
        pt = np.exp(-KC * (mu - 10.0))
        e = plx[i] - pt - off
        _, m1, m2 = mag(m[i] - mu + shift, V[i], s, *(c[i] for c in colour))[:3]
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
    lp, d_r, _, d_v, d_s, *d_colour = mag(m[:, None] - muk + shift, V[:, None], s,
                                          *(c[:, None] for c in colour))
    e = plx[:, None] - pt - off
    terms = logw_q + logp + lp - 0.5 * e * e / vp[:, None]
    if power:
        with np.errstate(divide="ignore"):
            terms = terms + power * np.log(e * e / vp[:, None]) - (np.log(3.0) if power == 2 else 0.0)
    top = terms.max(1)
    q = np.exp(terms - top[:, None])
    tot = q.sum(1)
    q /= tot[:, None]
    log_l = np.log(np.sqrt(2.0) * width) + top + np.log(tot) - 0.5 * (LOG2PI + np.log(vp))
    d_eta = np.einsum("nk,nkb->nb", q, resp)[:, 1:] - np.exp(logw[1:])
    d_s = (q * d_s).sum(1) if np.ndim(d_s) else 0.0
    d_off = (q * e).sum(1) / vp
    if power:  # d ln e^2k / d off = -2k / e, its weight vanishing where e does
        d_off -= 2.0 * power * (q * np.divide(1.0, e, out=np.zeros_like(e), where=e != 0)).sum(1)
    # d/dvp of -e^2 / (2 vp) - ln(vp) / 2, and of k ln(e^2 / vp).
    d_vp = (0.5 * (q * e * e).sum(1) / vp - (0.5 + power)) / vp
    return (log_l, (q * d_r).sum(1), (q * d_v).sum(1), d_s, d_off, (q * dlogp).sum(1), d_eta,
            *((q * d).sum(1) for d in d_colour), d_vp)


def log_weights(eta):
    """ln w = ln softmax(eta) of the histogram's bins (eta_0 = 0 first)."""
    logw = eta - eta.max()
    return logw - np.log(np.exp(logw).sum())


def mixture(f, fb, member, outlier, blend):
    """ln L_i = ln[(1 - f)(1 - f_b) L^member + f L^outlier + (1 - f) f_b L^blend] from each
    component's ln L (blends are a share of the non-outliers), each component's posterior
    probability, and d ln L_i / d f, d f_b."""
    la = np.log1p(-f) + np.log1p(-fb) + member
    lo = np.log(f) + outlier
    lb = np.log1p(-f) + np.log(fb) + blend
    li = np.logaddexp(np.logaddexp(la, lo), lb)
    qa, qo, qb = np.exp(la - li), np.exp(lo - li), np.exp(lb - li)
    return li, qa, qo, qb, qo / f - (qa + qb) / (1.0 - f), qb / fb - qa / (1.0 - fb)


def hyperprior_terms(t, eta, bins, walk, prior, centre, width, g):
    """Adds to g (d(-ln L)/d external) the random walk on the histogram's log-weights eta
    (indices `bins`, step `walk`) and the Gaussian priors of the parameters `prior`;
    returns their -ln of the density."""
    step = np.diff(eta) / walk
    g[bins] += step / walk
    g[bins[:-1]] -= step[1:] / walk
    zp = (t[prior] - centre[prior]) / width[prior]
    g[prior] += zp / width[prior]
    return 0.5 * step @ step + 0.5 * zp @ zp


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
    # The bootstrap's time is a difference, fit(B) less fit(0) (bench/hierarchical_bench.hpp):
    # unless the resamples take a good part of the full fit's time, that fit's run-to-run noise
    # swamps it (3 joint resamples came out at -589 and +407 ms each, for 72-93 ms solved
    # directly, beside a 9.7 s full fit; the default 100 take 8.6 s).
    resamples = int(get("rungcal_resamples"))
    if ours * resamples < 0.5 * get("rungcal_fit_ms"):
        sys.exit(f"too few resamples ({resamples}) to time the bootstrap against the full fit's "
                 f"{get('rungcal_fit_ms'):.0f} ms: give more (the default)")
    print(f"ratio scipy / rungcal per core: {scipy_ms / ours:.2f}x{target}")
