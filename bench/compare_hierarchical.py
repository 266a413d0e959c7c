#!/usr/bin/python3
# SPDX-License-Identifier: MIT
"""Times rungcal's bootstrap in the default fit configuration (hierarchical likelihood,
smooth-histogram distance prior, outlier and rising-blend mixture, sigma_int free, [Fe/H]
errors marginalised) against a plain numpy/scipy implementation of the same -ln L on the
same 3000-star mock (bench/bench_hierarchical), after checking that both reach the same
full-sample optimum (1e-6 relative in alpha, beta, gamma, offset, sigma_int; exit 1 if not).
The special case (parallax space, Huber, scatter fixed) stays in bench/compare_fit.py.
Run with Debian's Python:
    /usr/bin/python3 bench/compare_hierarchical.py [build-dir] [rungcal-resamples] [scipy-resamples]

The likelihood is written here from the model's description in
lib/rungcal/plfit/hierarchical.hpp, distance_prior.hpp, blend_density.hpp and docs/method.md,
vectorised over stars:
  L_i = (1 - f)(1 - f_b) L_i^member + f L_i^out + (1 - f) f_b L_i^blend
                     (Hogg, Bovy & Lang 2010; blends a share of the non-outliers)
  L_i^c = int dmu p(mu) p_c(m_i - mu - M_i + shift_c | V_i) N(pi_i | 10^(-0.2 (mu - 10)) + offset, s_pi^2 F_c^2)
  p(mu) = sum_j w_j N(mu | c_0 + j h, h^2), w = softmax(eta), eta_0 = 0  (Bovy, Hogg & Roweis 2011)
          c_0 = histogram_start - (alpha - histogram_alpha_ref)  (the grid moves with alpha)
the member's p_c = N(0, V), the outlier's N(0, V + width^2) shifted by outlier_shift_mag with
F = outlier_parallax_factor, the blend's the Gaussian convolved with a Gamma(2, mean s)
brightening that starts blend_min_mag brighter (closed form: p(r) = lambda^2 sqrt(V)
exp(lambda r + lambda^2 V / 2) [phi(z) + z Phi(z)], lambda = 2 / s, z = -(r + lambda V) /
sqrt(V)), its mu integral on its own node count at 1.3 curvature widths.
[Fe/H] errors marginalised as in Kelly 2007 (ApJ 665, 1489); -ln L adds
  sum_j (eta_j - eta_(j-1))^2 / (2 walk^2)    (the random-walk hyperprior)
and the Gaussian priors (blend_scale_mag's by default). The mu integral, the prior, the
magnitude terms and the timed resamples are bench/hierarchical_reference.py's, shared with
bench/compare_joint_hierarchical.py.
"""
import sys
import time

import numpy as np

from hierarchical_reference import (LOG2PI, Coordinates, bfgs, component, gaussian, hyperprior_terms,
                                    log_weights, mixture, read_output, rising_blend, rule, report_times,
                                    run_bench, time_resamples)

# 80 resamples: the bootstrap's time is fit(B) less fit(0), and with 20 the full fit's
# run-to-run noise put the ratio at 7.7x and 16.4x in two runs a minute apart (12.97x with 80).
lines, (X, M0, VM, PLX, VP, FEH, VFEH), scipy_resamples = run_bench("bench_hierarchical", 80, 10)
info, names, theta_r, modes_r, grad_r, CENTRE, WIDTH = read_output(lines)
get = lambda key: float(info[key][0][0])

if info["blend_component"][0][0] != "rising":
    sys.exit("compare_hierarchical.py: the blend component must be the default (rising)")
C0, ALPHA_REF, H = get("histogram_start"), get("histogram_alpha_ref"), get("histogram_step")
NB = int(get("histogram_bins"))
WALK = get("histogram_walk_sigma")
if get("histogram_kernel_fraction") != 1.0:  # the reference's kernels are one step wide
    sys.exit("compare_hierarchical.py: the histogram's kernels must be the default (one step wide)")
BLEND_MIN = get("blend_min_mag")
LAW = info["outlier_parallax_law"][0][0]
POWER = {"gaussian": 0, "rising": 1, "quartic": 2}[LAW]  # the law's power of e^2 (model.hpp)
MEMBER_RULE = rule(int(get("quadrature_nodes")))
BLEND_RULE = rule(min(128, int(get("quadrature_nodes")) * 5 // 3))

# rungcal's order (checked).
expected = (["alpha", "beta", "gamma", "parallax_offset_mas", "sigma_int", "outlier_fraction",
             "outlier_shift_mag", "outlier_width_mag", "outlier_parallax_factor", "blend_fraction",
             "blend_scale_mag"]
            + [f"distance_log_weight_{j}" for j in range(1, NB)] + ["feh_mean", "feh_spread"])
if names != expected:
    sys.exit(f"compare_hierarchical.py: unexpected parameters {names}")
IA, IB, IG, IO, IS, IF, ISH, IW, IPF, IFB, IBS = range(11)
IE = np.arange(11, 11 + NB - 1)
IZ, IT = len(names) - 2, len(names) - 1
COORD = Coordinates([IS, IW, IBS, IT], [IF, IFB], [], modes_r, above3=[IPF])
FREE, PRIOR = COORD.free, COORD.prior


class Likelihood:
    """-ln L and its gradient in internal coordinates over the free parameters, for stars
    `rows` with weights `w`; `fixed` holds every parameter's external value (the fixed ones'
    are used), `centre` the priors' centres."""

    def __init__(self, rows, w, fixed, centre):
        self.x, self.m, self.vm, self.plx, self.vp = X[rows], M0[rows], VM[rows], PLX[rows], VP[rows]
        self.z, self.s2 = FEH[rows], VFEH[rows]
        self.w, self.fixed, self.centre = w, np.array(fixed, dtype=float), centre
        self.caches = [np.full(len(rows), np.nan) for _ in range(3)]
        self.evaluations = 0

    def full(self, xi):
        x = COORD.to_internal(self.fixed)
        x[FREE] = xi
        return x

    def __call__(self, xi):
        self.evaluations += 1
        t = COORD.to_external(self.full(xi))
        alpha, beta, gamma, off, sigma = t[IA], t[IB], t[IG], t[IO], t[IS]
        f, fb, bs, shift, wide = t[IF], t[IFB], t[IBS], t[ISH], t[IW] ** 2
        factor = t[IPF]
        mu_z, tau2 = t[IZ], t[IT] ** 2
        eta = np.concatenate(([0.0], t[IE]))
        logw = log_weights(eta)
        c0 = C0 - (alpha - ALPHA_REF)
        w = self.w
        den = tau2 + self.s2
        dz = self.z - mu_z
        zbar = (tau2 * self.z + self.s2 * mu_z) / den
        wz = tau2 * self.s2 / den
        log_nz = -0.5 * (dz * dz / den + LOG2PI + np.log(den))
        r = self.m - (alpha + beta * self.x + gamma * zbar)
        V = self.vm + sigma * sigma + gamma * gamma * wz
        cm, co, cb = self.caches
        A = component(r, V, bs, gaussian, MEMBER_RULE, 1.0, self.plx, self.vp, 0.0, off, c0, H, logw, cm)
        # Under the rising and quartic laws a parallax star's outlier has the member's magnitude term.
        shape = 0.0 if POWER else 1.0
        O = component(r, V + shape * wide, bs, gaussian, MEMBER_RULE, 1.0, self.plx, factor ** 2 * self.vp,
                      shape * shift, off, c0, H, logw, co, power=POWER)
        Bl = component(r, V, bs, rising_blend, BLEND_RULE, 1.3, self.plx, self.vp, BLEND_MIN, off, c0, H, logw, cb)
        li, qa, qo, qb, d_f, d_fb = mixture(f, fb, A[0], O[0], Bl[0])
        mix = lambda k: qa * A[k] + qo * O[k] + qb * Bl[k]
        dm = -mix(1)  # d ln L_i / dM
        dv, d_off, d_grid = mix(2), mix(4), mix(5)
        g = np.zeros(len(t))  # d ln L / d external
        g[IA] = w @ (dm + d_grid)
        g[IB] = w @ (dm * self.x)
        g[IG] = w @ (dm * zbar + dv * 2.0 * gamma * wz)
        g[IO] = w @ d_off
        g[IS] = (w @ dv) * 2.0 * sigma
        g[IF] = w @ d_f
        g[ISH] = shape * (w @ (qo * O[1]))
        g[IW] = shape * (w @ (qo * O[2])) * 2.0 * t[IW]
        g[IPF] = w @ (qo * O[-1] * 2.0 * factor * self.vp)  # the outlier's variance F^2 vp
        g[IFB] = w @ d_fb
        g[IBS] = w @ (qb * Bl[3])
        g[IE] = w @ (qa[:, None] * A[6] + qo[:, None] * O[6] + qb[:, None] * Bl[6])
        g[IZ] = w @ (dz / den + dm * gamma * self.s2 / den)
        g[IT] = (w @ (0.5 * (dz * dz - den) / den ** 2 + dm * gamma * self.s2 * dz / den ** 2
                      + dv * gamma * gamma * self.s2 ** 2 / den ** 2)) * 2.0 * t[IT]
        g = -g
        value = -(w @ (li + log_nz)) + hyperprior_terms(t, eta, IE, WALK, PRIOR, self.centre, WIDTH, g)
        return value, (g * COORD.slope(t))[FREE]


def fit(lik, start, gtol):
    res = bfgs(lik, COORD.to_internal(start)[FREE], gtol)
    return COORD.to_external(lik.full(res.x)), res


N = len(X)
everyone = lambda fixed=theta_r: Likelihood(np.arange(N), np.ones(N), fixed, CENTRE)

# The likelihood itself, at rungcal's optimum (a fresh evaluation on both sides).
value, grad = everyone()(COORD.to_internal(theta_r)[FREE])
t0 = time.perf_counter()
for _ in range(5):
    everyone()(COORD.to_internal(theta_r)[FREE])
numpy_eval_ms = (time.perf_counter() - t0) / 5 * 1e3
nll_r = get("neg_log_likelihood")
print(f"stars {N}, hierarchical likelihood, smooth histogram ({NB} bins of {H} mag), outlier ({LAW} "
      f"parallax law) and rising-blend "
      f"mixture, sigma_int free, [Fe/H] errors marginalised")
print(f"-ln L at rungcal's optimum: rungcal {nll_r:.10f}, numpy {value:.10f} "
      f"(difference {value - nll_r:.2e})")
print(f"gradient there (free parameters, solver coordinates): max |rungcal - numpy| = "
      f"{np.max(np.abs(grad - grad_r[FREE])):.2e} (max |g| rungcal {np.max(np.abs(grad_r[FREE])):.2e})")

# An independent start: a magnitude-space line through the stars with parallax S/N > 10,
# scatter 0.1, fractions 0.02, the priors' centres, a flat distance histogram, the [Fe/H]
# sample's moments; the fixed parameters at rungcal's values.
good = PLX > 10.0 * np.sqrt(VP)
design = np.column_stack([np.ones(good.sum()), X[good], FEH[good]])
start = theta_r.copy()
start[[IA, IB, IG]] = np.linalg.lstsq(design, M0[good] - (10.0 - 5.0 * np.log10(PLX[good])), rcond=None)[0]
start[IO], start[IS], start[IF], start[IFB] = 0.0, 0.1, 0.02, 0.02
start[IE] = 0.0
start[PRIOR] = CENTRE[PRIOR]
start[IZ], start[IT] = FEH.mean(), np.sqrt(max(FEH.var() - VFEH.mean(), 0.05 ** 2))
full = everyone()
t0 = time.perf_counter()
theta_s, res = fit(full, start, 1e-7)
full_s = time.perf_counter() - t0
print(f"-ln L at scipy's own optimum: {res.fun:.10f} (rungcal's {nll_r:.10f})")
check = np.array([IA, IB, IG, IO, IS])
rel = np.abs(theta_s[check] / theta_r[check] - 1)
print(f"full sample (scipy BFGS from its own start: {res.nit} iterations, {full.evaluations} evaluations, "
      f"{full_s:.1f} s, max |gradient| {np.max(np.abs(res.jac)):.1e}, '{res.message}';\n"
      f"             "
      f"rungcal {int(get('full_iterations'))} iterations, {get('rungcal_fit_ms') / 1e3:.1f} s with covariance):")
for j, rj in zip(check, rel):
    print(f"  {names[j]:20s} rungcal {theta_r[j]: .10f}  scipy {theta_s[j]: .10f}  rel {rj:.1e}")
print(f"  also: outlier_fraction {theta_r[IF]:.6f} / {theta_s[IF]:.6f}, blend_fraction {theta_r[IFB]:.6f} / "
      f"{theta_s[IFB]:.6f}, blend_scale {theta_r[IBS]:.6f} / {theta_s[IBS]:.6f}, feh_spread {theta_r[IT]:.6f} / "
      f"{theta_s[IT]:.6f}, max |eta difference| {np.max(np.abs(theta_r[IE] - theta_s[IE])):.1e}")
worst = np.max(rel)
print(f"full-sample optimum agrees to {worst:.1e} relative in alpha, beta, gamma, offset, sigma_int (target 1e-6)")
if not worst <= 1e-6:
    print("FAIL: the optima differ by more than 1e-6 relative; no timing")
    sys.exit(1)


# Resamples as rungcal's bootstrap: stars drawn with replacement, a repeated star kept once
# with its count as weight (time_resamples), every prior's centre redrawn from its Gaussian,
# the solve started at the full optimum and stopped when the largest gradient component is
# below 1e-4 (rungcal instead stops at 0.01 of the gradient in the full sample's metric, or
# on a relative cost change below 1e-9, which scipy's BFGS does not offer).
def solve_resample(rows, weights, rng):
    centre = CENTRE.copy()
    centre[PRIOR] += WIDTH[PRIOR] * rng.standard_normal(len(PRIOR))
    lik = Likelihood(rows, weights, theta_s, centre)
    nit = fit(lik, theta_s, 1e-4)[1].nit
    return lik.evaluations, nit


times, evals, iters = time_resamples(N, scipy_resamples, solve_resample)
report_times(info, times, evals, iters, numpy_eval_ms, "rungcal bootstrap", f"{N} stars", " (target >= 10x)")
