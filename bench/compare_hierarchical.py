#!/usr/bin/python3
# SPDX-License-Identifier: MIT
"""Times rungcal's bootstrap in the default fit configuration (hierarchical likelihood,
smooth-histogram distance prior, outlier mixture, sigma_int free, [Fe/H] errors
marginalised) against a plain numpy/scipy implementation of the same -ln L on the same
3000-star mock (bench/bench_hierarchical), after checking that both reach the same
full-sample optimum (1e-6 relative in alpha, beta, gamma, offset, sigma_int; exit 1 if not).
The special case (parallax space, Huber, scatter fixed) stays in bench/compare_fit.py.
Run with Debian's Python:
    /usr/bin/python3 bench/compare_hierarchical.py [build-dir] [rungcal-resamples] [scipy-resamples]

The likelihood is written here from the model's description in
lib/rungcal/plfit/hierarchical.hpp and distance_prior.hpp, vectorised over stars:
  L_i = (1 - f) L_i^member + f L_i^out                  (Hogg, Bovy & Lang 2010)
  L_i^c = int dmu p(mu) N(m_i | mu + M_i, V_i) N(pi_i | 10^(-0.2 (mu - 10)) + offset, s_pi^2)
  p(mu) = sum_j w_j N(mu | c_0 + j h, h^2), w = softmax(eta), eta_0 = 0  (Bovy, Hogg & Roweis 2011)
  [Fe/H] errors marginalised as in Kelly 2007 (ApJ 665, 1489),
  -ln L += sum_j (eta_j - eta_(j-1))^2 / (2 * 1.5^2)    (the random-walk hyperprior)
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

build = sys.argv[1] if len(sys.argv) > 1 else "build"
rungcal_resamples = int(sys.argv[2]) if len(sys.argv) > 2 else 20
scipy_resamples = int(sys.argv[3]) if len(sys.argv) > 3 else 10

with tempfile.TemporaryDirectory() as tmp:
    path = os.path.join(tmp, "stars.csv")
    out = subprocess.run([os.path.join(build, "bench", "bench_hierarchical"), str(rungcal_resamples), path],
                         check=True, capture_output=True, text=True).stdout
    X, M0, VM, PLX, VP, FEH, VFEH = np.loadtxt(path, delimiter=",", comments="#").T

info, names, theta_r, modes_r, grad_r = {}, [], [], [], []
for line in out.splitlines():
    w = line.split()
    if w[0] == "param":
        names.append(w[1]), theta_r.append(float(w[2])), modes_r.append(w[3]), grad_r.append(float(w[4]))
    else:
        info.setdefault(w[0], []).append(w[1:])
get = lambda key: float(info[key][0][0])
# The outlier component's shift and width are parameters held fixed by default: this
# implementation takes them as the constants outlier_mag_shift / outlier_mag_width.
held = [i for i, n in enumerate(names) if n in ("outlier_shift_mag", "outlier_width_mag")]
if any(modes_r[i] != "fixed" for i in held):
    sys.exit("compare_hierarchical.py: the outlier component's shift and width must be held fixed")
for i in reversed(held):
    del names[i], theta_r[i], modes_r[i], grad_r[i]
theta_r, grad_r = np.array(theta_r), np.array(grad_r)
if any(m != "free" for m in modes_r):
    sys.exit("compare_hierarchical.py: every parameter must be free (the default configuration)")

C0, H = get("histogram_start"), get("histogram_step")
NB = int(get("histogram_bins"))
WALK = get("histogram_walk_sigma")
WIDE = get("outlier_mag_width") ** 2
SHIFT = get("outlier_mag_shift")
PLX_F2 = get("outlier_parallax_factor") ** 2
gh_x, gh_w = hermgauss(int(get("quadrature_nodes")))
NODES = np.sqrt(2.0) * gh_x
LOGW = np.log(gh_w) + gh_x ** 2
KC = 0.2 * np.log(10.0)
LOG2PI = np.log(2.0 * np.pi)
JB = np.arange(NB, dtype=float)

# Internal coordinates: alpha, beta, gamma, offset, ln sigma_int, logit f, eta_1..eta_(B-1),
# feh_mean, ln feh_spread -- rungcal's order (checked against its names below).
expected = (["alpha", "beta", "gamma", "parallax_offset_mas", "sigma_int", "outlier_fraction"]
            + [f"distance_log_weight_{j}" for j in range(1, NB)] + ["feh_mean", "feh_spread"])
if names != expected:
    sys.exit(f"compare_hierarchical.py: unexpected parameters {names}")
P = len(names)
IA, IB, IG, IO, IS, IF = range(6)
IE = slice(6, 6 + NB - 1)
IZ, IT = P - 2, P - 1


def to_internal(t):
    x = np.array(t, dtype=float)
    x[IS], x[IT] = np.log(t[IS]), np.log(t[IT])
    x[IF] = np.log(t[IF] / (1.0 - t[IF]))
    return x


def to_external(x):
    t = np.array(x, dtype=float)
    t[IS], t[IT] = np.exp(x[IS]), np.exp(x[IT])
    t[IF] = 1.0 / (1.0 + np.exp(-x[IF]))
    return t


def prior(mu, logw, curvature=True):
    """ln p(mu) and each bin's responsibility, over all bins; with curvature also
    d ln p / dmu and d2 ln p / dmu2 (for the mode search)."""
    d = JB - ((mu - C0) / H)[..., None]
    a = d * d
    a *= -0.5
    a += logw
    top = a.max(-1, keepdims=True)
    a -= top
    r = np.exp(a, out=a)
    tot = r.sum(-1)
    r /= tot[..., None]
    logp = top[..., 0] + np.log(tot) - np.log(H) - 0.5 * LOG2PI
    if not curvature:
        return logp, r
    first = (r * d).sum(-1)
    second = (r * (d * d - 1.0)).sum(-1)
    return logp, first / H, (second - first * first) / (H * H), r


def component(m, V, plx, vp, mshift, off, logw, cache):
    """ln of one mixture component's mu integral per star and its derivatives in M, V,
    offset and the log-weights. cache: each star's last mode, the next Newton start."""
    def curvature(i, mu):
        logp, d1, d2, _ = prior(mu, logw)
        pt = np.exp(-KC * (mu - 10.0))
        r, e = m[i] - mu - mshift[i], plx[i] - pt - off
        slope = d1 + r / V[i] - e * KC * pt / vp[i]
        fisher = 1.0 / V[i] + KC * KC * pt * pt / vp[i] - np.minimum(d2, 0.0)
        exact = 1.0 / V[i] + KC * KC * pt * (pt - e) / vp[i] - d2
        floor = 0.2 * fisher  # the quadrature's width: a smooth maximum of exact and floor
        width_h = 0.5 * (exact + floor + np.sqrt((exact - floor) ** 2 + 0.01 * fisher * fisher))
        return np.where(exact > floor, exact, fisher), slope, width_h

    mu = np.where(np.isfinite(cache), cache, m - mshift)
    active = np.arange(len(m))
    for _ in range(60):
        h, slope, _ = curvature(active, mu[active])
        step = np.clip(slope / h, -1.0, 1.0)
        mu[active] = np.clip(mu[active] + step, -10.0, 60.0)
        active = active[np.abs(step) >= 1e-10]
        if active.size == 0:
            break
    _, _, width_h = curvature(np.arange(len(m)), mu)
    cache[:] = mu
    width = 1.0 / np.sqrt(width_h)
    muk = mu[:, None] + width[:, None] * NODES
    logp, resp = prior(muk, logw, curvature=False)
    pt = np.exp(-KC * (muk - 10.0))
    r = m[:, None] - muk - mshift[:, None]
    e = plx[:, None] - pt - off
    terms = LOGW + logp - 0.5 * r * r / V[:, None] - 0.5 * e * e / vp[:, None]
    top = terms.max(1)
    q = np.exp(terms - top[:, None])
    tot = q.sum(1)
    q /= tot[:, None]
    norm = -0.5 * (2.0 * LOG2PI + np.log(V) + np.log(vp))
    log_l = np.log(np.sqrt(2.0) * width) + top + np.log(tot) + norm
    d_m = (q * r).sum(1) / V
    d_v = 0.5 * ((q * r * r).sum(1) - V) / (V * V)
    d_off = (q * e).sum(1) / vp
    d_eta = np.einsum("nk,nkb->nb", q, resp)[:, 1:] - np.exp(logw[1:])  # d ln p / d eta_j, j >= 1
    return log_l, d_m, d_v, d_off, d_eta


class Likelihood:
    """-ln L and its gradient in internal coordinates for stars `rows` with weights `w`."""

    def __init__(self, rows, w):
        self.x, self.m, self.vm, self.plx, self.vp = X[rows], M0[rows], VM[rows], PLX[rows], VP[rows]
        self.z, self.s2, self.w = FEH[rows], VFEH[rows], w
        self.cache_member = np.full(len(rows), np.nan)
        self.cache_outlier = np.full(len(rows), np.nan)
        self.evaluations = 0

    def __call__(self, xi):
        self.evaluations += 1
        t = to_external(xi)
        alpha, beta, gamma, off, sigma, f = t[IA], t[IB], t[IG], t[IO], t[IS], t[IF]
        mu_z, tau2 = t[IZ], t[IT] ** 2
        eta = np.concatenate(([0.0], t[IE]))
        logw = eta - eta.max()
        logw -= np.log(np.exp(logw).sum())
        w = self.w
        den = tau2 + self.s2
        dz = self.z - mu_z
        zbar = (tau2 * self.z + self.s2 * mu_z) / den
        wz = tau2 * self.s2 / den
        log_nz = -0.5 * (dz * dz / den + LOG2PI + np.log(den))
        Mi = alpha + beta * self.x + gamma * zbar
        V = self.vm + sigma * sigma + gamma * gamma * wz
        a = component(self.m, V, self.plx, self.vp, Mi, off, logw, self.cache_member)
        b = component(self.m, V + WIDE, self.plx, PLX_F2 * self.vp, Mi - SHIFT, off, logw, self.cache_outlier)
        la, lb = np.log1p(-f) + a[0], np.log(f) + b[0]
        li = np.logaddexp(la, lb)
        q = np.exp(la - li)
        dm, dv, doff = (q * a[i] + (1 - q) * b[i] for i in (1, 2, 3))
        deta = q[:, None] * a[4] + (1 - q)[:, None] * b[4]
        g = np.empty(P)
        g[IA] = w @ dm
        g[IB] = w @ (dm * self.x)
        g[IG] = w @ (dm * zbar + dv * 2.0 * gamma * wz)
        g[IO] = w @ doff
        g[IS] = (w @ dv) * 2.0 * sigma * sigma
        g[IF] = (w @ ((1 - q) / f - q / (1 - f))) * f * (1 - f)
        g[IE] = w @ deta
        g[IZ] = w @ (dz / den + dm * gamma * self.s2 / den)
        g[IT] = (w @ (0.5 * (dz * dz - den) / den ** 2 + dm * gamma * self.s2 * dz / den ** 2
                      + dv * gamma * gamma * self.s2 ** 2 / den ** 2)) * 2.0 * tau2
        value = -(w @ (li + log_nz))
        g = -g
        step = np.diff(eta) / WALK
        value += 0.5 * step @ step
        g[IE] += step / WALK
        g[6:6 + NB - 2] -= step[1:] / WALK
        return value, g


def fit(lik, start, gtol):
    # Dense BFGS, as rungcal's Ceres GradientProblemSolver: L-BFGS-B crawls here (the
    # offset's curvature is ~1e7 times the log-weights'). gtol on the largest gradient
    # component, as Ceres' gradient_tolerance.
    res = minimize(lik, to_internal(start), jac=True, method="BFGS",
                   options=dict(gtol=gtol, norm=np.inf, maxiter=5000))
    return to_external(res.x), res


N = len(X)
everyone = Likelihood(np.arange(N), np.ones(N))

# The likelihood itself, at rungcal's optimum (a fresh evaluation on both sides).
value, grad = Likelihood(np.arange(N), np.ones(N))(to_internal(theta_r))
t0 = time.perf_counter()
for _ in range(5):
    Likelihood(np.arange(N), np.ones(N))(to_internal(theta_r))
numpy_eval_ms = (time.perf_counter() - t0) / 5 * 1e3
nll_r = get("neg_log_likelihood")
print(f"stars {N}, hierarchical likelihood, smooth histogram ({NB} bins of {H} mag from mu = {C0:.4f}), "
      f"outlier mixture, sigma_int free, [Fe/H] errors marginalised")
print(f"-ln L at rungcal's optimum: rungcal {nll_r:.10f}, numpy {value:.10f} "
      f"(difference {value - nll_r:.2e})")
print(f"gradient there: max |rungcal - numpy| = {np.max(np.abs(grad - grad_r)):.2e} (max |g| rungcal "
      f"{np.max(np.abs(grad_r)):.2e})")

# An independent start: a magnitude-space line through the stars with parallax S/N > 10,
# a flat distance histogram, the [Fe/H] sample's moments.
good = PLX > 10.0 * np.sqrt(VP)
A = np.column_stack([np.ones(good.sum()), X[good], FEH[good]])
line = np.linalg.lstsq(A, M0[good] - (10.0 - 5.0 * np.log10(PLX[good])), rcond=None)[0]
start = np.concatenate((line, [0.0, 0.1, 0.02], np.zeros(NB - 1),
                        [FEH.mean(), np.sqrt(max(FEH.var() - VFEH.mean(), 0.05 ** 2))]))
t0 = time.perf_counter()
theta_s, res = fit(everyone, start, 1e-7)
full_s = time.perf_counter() - t0
check = slice(0, 5)
rel = np.abs(theta_s[check] / theta_r[check] - 1)
print(f"full sample (scipy BFGS from its own start: {res.nit} iterations, {everyone.evaluations} evaluations, "
      f"{full_s:.1f} s, max |gradient| {np.max(np.abs(res.jac)):.1e}, '{res.message}';\n"
      f"             "
      f"rungcal {int(get('full_iterations'))} iterations, {get('rungcal_fit_ms') / 1e3:.1f} s with covariance):")
for j in range(5):
    print(f"  {names[j]:20s} rungcal {theta_r[j]: .10f}  scipy {theta_s[j]: .10f}  rel {rel[j]:.1e}")
worst = np.max(rel)
print(f"  also: outlier_fraction {theta_r[IF]:.6f} / {theta_s[IF]:.6f}, feh_spread {theta_r[IT]:.6f} / "
      f"{theta_s[IT]:.6f}, max |eta difference| {np.max(np.abs(theta_r[IE] - theta_s[IE])):.1e}")
print(f"full-sample optimum agrees to {worst:.1e} relative in alpha, beta, gamma, offset, sigma_int (target 1e-6)")
if not worst <= 1e-6:
    print("FAIL: the optima differ by more than 1e-6 relative; no timing")
    sys.exit(1)

# Resamples as rungcal's bootstrap: stars drawn with replacement, a repeated star kept once
# with its count as weight, the solve started at the full optimum and stopped when the
# largest gradient component is below 1e-4 (rungcal's bootstrap gradient tolerance; Ceres
# also stops on a relative cost change below 1e-9, which scipy's BFGS does not offer).
rng = np.random.default_rng(1)
times, evals, iters = [], [], []
for _ in range(scipy_resamples):
    counts = np.bincount(rng.integers(0, N, N), minlength=N)
    rows = np.nonzero(counts)[0]
    t0 = time.perf_counter()
    lik = Likelihood(rows, counts[rows].astype(float))
    th, r = fit(lik, theta_s, 1e-4)
    times.append(time.perf_counter() - t0)
    evals.append(lik.evaluations)
    iters.append(r.nit)
scipy_ms = 1e3 * np.mean(times)
ours = get("rungcal_ms_per_resample")
print(f"scipy BFGS:        {scipy_ms:.1f} ms per resample (1 core, {scipy_resamples} resamples, "
      f"{np.mean(iters):.0f} iterations / {np.mean(evals):.0f} evaluations each; "
      f"{', '.join(f'{1e3 * t:.0f}' for t in times)} ms)")
print(f"rungcal bootstrap: {ours:.1f} ms per resample ({info['rungcal_threads'][0][0]} thread, "
      f"{int(get('rungcal_resamples'))} resamples, {int(get('bootstrap_failed'))} failed; "
      f"{get('direct_iterations_per_resample'):.0f} iterations and "
      f"{get('direct_ms_per_resample'):.0f} ms each in {len(info['direct_resample'])} direct solves)")
print(f"one evaluation of -ln L and gradient, 3000 stars, cold mode search: rungcal "
      f"{get('rungcal_ms_per_evaluation'):.1f} ms, numpy {numpy_eval_ms:.1f} ms")
print(f"ratio scipy / rungcal per core: {scipy_ms / ours:.2f}x (target >= 10x)")
