#!/usr/bin/python3
# SPDX-License-Identifier: MIT
"""Times rungcal's joint bootstrap in the default joint configuration (the hierarchical joint
likelihood of three relations X, V, I: shared latent distance per star, sigma_int per
relation, scatter correlation rho free, shared E(B-V) errors, outlier and coloured-blend
mixture with per-relation brightening ratios free, [Fe/H] errors marginalised,
smooth-histogram distance prior) against a plain numpy/scipy
implementation of the same -ln L on the same 1000-star mock (bench/bench_joint_hierarchical),
after checking that both reach the same full-sample optimum (1e-6 relative in every alpha,
beta, gamma, sigma_int, rho, the offset and the blend ratios; exit 1 if not). bench/compare_hierarchical.py
does the same for one relation.
Run with Debian's Python:
    /usr/bin/python3 bench/compare_joint_hierarchical.py [build-dir] [rungcal-resamples] [scipy-resamples]

The likelihood is written here from docs/method.md ("The hierarchical joint fit"),
lib/rungcal/plfit/joint_hierarchical.hpp and blend_density.hpp, vectorised over stars. Each star's K magnitudes
scatter about mu + M_k with
  S_kl = delta_kl (s_m,k^2 + sigma_k^2) + (1 - delta_kl) rho sigma_k sigma_l + c_k c_l s_E^2 + gamma_k gamma_l W,
and the K-variate Gaussian is used in its factorised form (our choice; the direct form
would need the mu integral of a K-variate density): with r = m - M, P = S^-1, a = 1^T P 1,
  N_K(r - mu 1 | S) = N(m_eff - mu | 0, 1/a) exp(c),  m_eff = 1^T P r / a,
  c = -(K-1)/2 ln 2 pi - 1/2 ln det S - 1/2 ln a - 1/2 (r - m_eff 1)^T P (r - m_eff 1),
so each star's mu integral is one relation's on m_eff with variance 1/a:
  L_i = (1 - f)(1 - f_b) L_i^member + f L_i^out + (1 - f) f_b L_i^blend
  L_i^c = int dmu p(mu) p_c(m_eff - mu - shift_c) N(pi_i | 10^(-0.2 (mu - 10)) + offset, s_pi^2 F_c^2)
  p(mu) = sum_j w_j N(mu | c_0 + j h, h^2), w = softmax(eta), eta_0 = 0,
          c_0 = histogram_start - (mean alpha - histogram_alpha_ref)  (the grid moves with it)
the member's p_c = N(0, 1/a), the outlier's N(0, 1/a + width^2) with F = outlier_parallax_factor,
the blend's coloured: a blend brightens relation k by kap_k (b0 + b), b0 = blend_min_mag,
b ~ Gamma(2, mean s), kap_first = 1 and the others the blend_ratio_<name> parameters (log
scale). Brightening r by (b0 + b) kap moves m_eff by kap_eff (b0 + b) and the colour term by
-(b0 + b) t - (b0 + b)^2 D / 2 (h = P kap - kap_eff P 1, kap_eff = 1^T P kap / a, D = kap^T h,
t = kap^T P (r - m_eff 1)), so the blend's p_c is the b-integral
  exp(-b0 t - b0^2 D / 2) lambda^2 int_0^inf b N(y + kap_eff b | 0, 1/a) exp(-(lambda + t + b0 D) b - D b^2 / 2) db,
y = m_eff - mu + kap_eff b0, lambda = 2 / s, in closed form (hierarchical_reference.py's
coloured_rising_blend; with kap = 1 it is the grey p(r) = lambda^2 sqrt(V) exp(lambda r +
lambda^2 V / 2) [phi(z) + z Phi(z)], z = -(r + lambda V) / sqrt(V)). [Fe/H] errors marginalised as in Kelly 2007
(ApJ 665, 1489); -ln L adds the random walk on eta (step histogram_walk_sigma) and the
Gaussian priors (blend_scale_mag's by default). The gradient is analytic: d/dm_eff and d/d(1/a)
and d/d(kap_eff, D, t) of the mixture, then d/dr, d/dS and d/dkap by matrix calculus, then the
chain rule.
The mu integral (the blend component with its own node count and 1.3 curvature widths), the
prior, the magnitude terms and the timed resamples are bench/hierarchical_reference.py's,
shared with bench/compare_hierarchical.py.
"""
import sys
import time

import numpy as np

from hierarchical_reference import (LOG2PI, Coordinates, bfgs, component, coloured_rising_blend, gaussian,
                                    hyperprior_terms, log_weights, mixture, read_output, rule, report_times,
                                    run_bench, time_resamples)

lines, (STAR, REL, XE, ME, VPHOT, COEF, PLXE, VPE, VEBVE, FEHE, VFEHE, KINDE), scipy_resamples = run_bench(
    "bench_joint_hierarchical", 100, 10)

info, names, theta_r, modes_r, grad_r, CENTRE, WIDTH = read_output(lines)
get = lambda key: float(info[key][0][0])
relations = [r[1] for r in info["relation"]]
R = len(relations)

# Stars by row, relations by column: the mock gives every star every relation.
N = int(STAR.max()) + 1
if len(STAR) != N * R or np.any(STAR.reshape(N, R) != np.arange(N)[:, None]) or \
        np.any(REL.reshape(N, R) != np.arange(R)):
    sys.exit("compare_joint_hierarchical.py: every star must have every relation, in order")
if np.any(KINDE != 0):
    sys.exit("compare_joint_hierarchical.py: parallax calibrators only")
X, M0, VPHOT, COEF = (a.reshape(N, R) for a in (XE, ME, VPHOT, COEF))
PLX, VP, VEBV, FEH, VFEH = (a.reshape(N, R)[:, 0] for a in (PLXE, VPE, VEBVE, FEHE, VFEHE))

if info["blend_component"][0][0] != "rising":
    sys.exit("compare_joint_hierarchical.py: the blend component must be the default (rising)")
C0, ALPHA_REF, H = get("histogram_start"), get("histogram_alpha_ref"), get("histogram_step")
NB = int(get("histogram_bins"))
WALK = get("histogram_walk_sigma")
if get("histogram_kernel_fraction") != 1.0:  # the reference's kernels are one step wide
    sys.exit("compare_joint_hierarchical.py: the histogram's kernels must be the default (one step wide)")
BLEND_MIN = get("blend_min_mag")
LAW = info["outlier_parallax_law"][0][0]
POWER = {"gaussian": 0, "rising": 1, "quartic": 2}[LAW]  # the law's power of e^2 (model.hpp)
MEMBER_RULE = rule(int(get("quadrature_nodes")))
BLEND_RULE = rule(min(128, int(get("quadrature_nodes")) * 5 // 3))

# The layout, in rungcal's order (checked), and each parameter's solver scale.
expected = [f"{p}_{r}" for r in relations for p in ("alpha", "beta", "gamma", "sigma_int")]
expected += ["scatter_correlation", "parallax_offset_mas", "outlier_fraction", "outlier_shift_mag",
             "outlier_width_mag", "outlier_parallax_factor", "blend_fraction", "blend_scale_mag"]
expected += [f"blend_ratio_{r}" for r in relations[1:]]
expected += [f"distance_log_weight_{j}" for j in range(1, NB)] + ["feh_mean", "feh_spread"]
if names != expected:
    sys.exit(f"compare_joint_hierarchical.py: unexpected parameters {names}")
ix = {n: j for j, n in enumerate(names)}
IA = np.array([ix[f"alpha_{r}"] for r in relations])
IBETA = np.array([ix[f"beta_{r}"] for r in relations])
IG = np.array([ix[f"gamma_{r}"] for r in relations])
IS = np.array([ix[f"sigma_int_{r}"] for r in relations])
IR, IO, IF, ISH, IW, IPF = (ix[n] for n in ("scatter_correlation", "parallax_offset_mas",
                                            "outlier_fraction", "outlier_shift_mag", "outlier_width_mag",
                                            "outlier_parallax_factor"))
IFB, IBS, IZ, IT = (ix[n] for n in ("blend_fraction", "blend_scale_mag", "feh_mean", "feh_spread"))
IK = np.array([ix[f"blend_ratio_{r}"] for r in relations[1:]], dtype=int)
IE = np.arange(ix["distance_log_weight_1"], ix["distance_log_weight_1"] + NB - 1)
COORD = Coordinates(np.concatenate((IS, [IW, IBS, IT], IK)), [IF, IFB], [IR], modes_r, above3=[IPF])
FREE, PRIOR = COORD.free, COORD.prior


class Likelihood:
    """-ln L and its gradient in internal coordinates over the free parameters, for stars
    `rows` with weights `w`; `fixed` holds every parameter's external value (the fixed ones'
    are used), `centre` the priors' centres; `free`: the parameters solved for."""

    def __init__(self, rows, w, fixed, centre, free=FREE):
        self.x, self.m, self.vphot, self.coef = X[rows], M0[rows], VPHOT[rows], COEF[rows]
        self.plx, self.vp, self.vebv, self.z, self.s2 = PLX[rows], VP[rows], VEBV[rows], FEH[rows], VFEH[rows]
        self.w, self.fixed, self.centre, self.free = w, np.array(fixed, dtype=float), centre, free
        self.caches = [np.full(len(rows), np.nan) for _ in range(3)]
        self.evaluations = 0

    def full(self, xi):
        x = COORD.to_internal(self.fixed)
        x[self.free] = xi
        return x

    def __call__(self, xi):
        self.evaluations += 1
        t = COORD.to_external(self.full(xi))
        alpha, beta, gamma, sig = t[IA], t[IBETA], t[IG], t[IS]
        rho, off, f, fb, bs = t[IR], t[IO], t[IF], t[IFB], t[IBS]
        shift, wide, factor = t[ISH], t[IW] ** 2, t[IPF]
        mu_z, tau2 = t[IZ], t[IT] ** 2
        eta = np.concatenate(([0.0], t[IE]))
        logw = log_weights(eta)
        c0 = C0 - (alpha.mean() - ALPHA_REF)
        w, K = self.w, R
        # [Fe/H]: the latent value's mean and variance given the measurement, shared by the relations.
        den = tau2 + self.s2
        dz = self.z - mu_z
        zbar = (tau2 * self.z + self.s2 * mu_z) / den
        wz = tau2 * self.s2 / den
        log_nz = -0.5 * (dz * dz / den + LOG2PI + np.log(den))
        r = self.m - (alpha + beta * self.x + gamma * zbar[:, None])
        offdiag = rho * np.outer(sig, sig)
        np.fill_diagonal(offdiag, 0.0)
        S = (self.coef[:, :, None] * self.coef[:, None, :] * self.vebv[:, None, None]
             + np.outer(gamma, gamma) * wz[:, None, None] + offdiag)
        S[:, np.arange(K), np.arange(K)] += self.vphot + sig ** 2
        try:
            chol = np.linalg.cholesky(S)
        except np.linalg.LinAlgError:  # rho below -1/(K-1): outside the model, the solver steps back
            return np.inf, np.full(len(self.free), np.nan)
        log_det = 2.0 * np.log(np.diagonal(chol, axis1=1, axis2=2)).sum(1)
        P = np.linalg.inv(S)
        p = P.sum(2)
        a = p.sum(1)
        s = np.einsum("nkl,nl->nk", P, r)
        m_eff = s.sum(1) / a
        u = s - m_eff[:, None] * p
        colour = -0.5 * ((K - 1) * LOG2PI + log_det + np.log(a) + (u * (r - m_eff[:, None])).sum(1))
        v = 1.0 / a
        # The coloured blend: brightening relation k by kap_k (b0 + b) moves r to r + (b0 + b) kap,
        # so m_eff by kap_eff (b0 + b), and the colour term by -(b0 + b) t - (b0 + b)^2 D / 2
        # (expanding (r - m_eff 1)^T P (r - m_eff 1); 1^T u = 0), with h = P kap - kap_eff p,
        # kap_eff = p^T kap / a, D = kap^T h >= 0 and t = kap^T u. The mu integral is the
        # coloured density's at m_eff - mu + kap_eff b0 with tilt t + b0 D.
        kap = np.concatenate(([1.0], t[IK]))
        kap_eff = (p @ kap) / a
        hk = P @ kap - kap_eff[:, None] * p
        D = np.maximum(hk @ kap, 0.0)
        tilt = u @ kap
        cm, co, cb = self.caches
        A = component(m_eff, v, bs, gaussian, MEMBER_RULE, 1.0, self.plx, self.vp, 0.0, off, c0, H, logw, cm)
        # Under the rising and quartic laws a parallax star's outlier has the member's magnitude term.
        shape = 0.0 if POWER else 1.0
        O = component(m_eff, v + shape * wide, bs, gaussian, MEMBER_RULE, 1.0, self.plx, factor ** 2 * self.vp,
                      shape * shift, off, c0, H, logw, co, power=POWER)
        Bl = component(m_eff + kap_eff * BLEND_MIN, v, bs, coloured_rising_blend, BLEND_RULE, 1.3, self.plx,
                       self.vp, 0.0, off, c0, H, logw, cb, (kap_eff, D, tilt + BLEND_MIN * D))
        blend_log_l = Bl[0] - BLEND_MIN * tilt - 0.5 * BLEND_MIN ** 2 * D
        li, qa, qo, qb, d_f, d_fb = mixture(f, fb, A[0], O[0], blend_log_l)
        mix = lambda k: qa * A[k] + qo * O[k] + qb * Bl[k]
        f_m, f_v, d_off, d_grid = mix(1), mix(2), mix(4), mix(5)
        d_eta = qa[:, None] * A[6] + qo[:, None] * O[6] + qb[:, None] * Bl[6]
        # d ln L_i / dr and / dS (S symmetric; G is the symmetric gradient).
        gr = (f_m / a)[:, None] * p - u
        pu = p[:, :, None] * u[:, None, :]
        G = (-(f_m / (2.0 * a))[:, None, None] * (pu + pu.transpose(0, 2, 1))
             + (f_v / a ** 2 + 0.5 / a)[:, None, None] * p[:, :, None] * p[:, None, :]
             - 0.5 * P + 0.5 * u[:, :, None] * u[:, None, :])
        # The coloured blend's own terms, through kap_eff (shift and tilt), D and t:
        # d kap_eff = -p^T dS h / a + p^T dkap / a, dD = -h^T dS h + 2 h^T dkap,
        # dt = h^T dr - h^T dS u + u^T dkap (dP = -P dS P).
        d_kap = Bl[7] + BLEND_MIN * Bl[1]
        d_curv = Bl[8] + BLEND_MIN * Bl[9] - 0.5 * BLEND_MIN ** 2
        d_tilt = Bl[9] - BLEND_MIN
        gr += (qb * d_tilt)[:, None] * hk
        ph = p[:, :, None] * hk[:, None, :]
        hu = hk[:, :, None] * u[:, None, :]
        G -= ((qb * d_kap / (2.0 * a))[:, None, None] * (ph + ph.transpose(0, 2, 1))
              + (qb * d_curv)[:, None, None] * hk[:, :, None] * hk[:, None, :]
              + (0.5 * qb * d_tilt)[:, None, None] * (hu + hu.transpose(0, 2, 1)))
        Gg = np.einsum("nkl,l->nk", G, gamma)
        Gs = np.einsum("nkl,l->nk", G, sig)
        Gdiag = np.diagonal(G, axis1=1, axis2=2)
        g = np.zeros(len(t))
        g[IA] = w @ (-gr) + (w @ d_grid) / K
        g[IBETA] = w @ (-gr * self.x)
        g[IG] = w @ (-gr * zbar[:, None] + 2.0 * Gg * wz[:, None])
        g[IS] = w @ (2.0 * sig * Gdiag + 2.0 * rho * (Gs - Gdiag * sig))
        g[IR] = w @ (np.einsum("nkl,k,l->n", G, sig, sig) - Gdiag @ (sig * sig))
        g[IO] = w @ d_off
        g[IF] = w @ d_f
        g[IFB] = w @ d_fb
        g[IK] = (w @ (qb[:, None] * (d_kap[:, None] * p / a[:, None] + 2.0 * d_curv[:, None] * hk
                                     + d_tilt[:, None] * u)))[1:]
        g[IBS] = w @ (qb * Bl[3])
        g[ISH] = shape * (w @ (qo * O[1]))
        g[IW] = shape * (w @ (qo * O[2])) * 2.0 * t[IW]
        g[IPF] = w @ (qo * O[-1] * 2.0 * factor * self.vp)  # the outlier's variance F^2 vp
        g[IE] = w @ d_eta
        d_zbar = -(gr * gamma).sum(1)
        d_wz = Gg @ gamma
        g[IZ] = w @ (dz / den + d_zbar * self.s2 / den)
        g[IT] = (w @ (0.5 * (dz * dz - den) / den ** 2 + d_zbar * self.s2 * dz / den ** 2
                      + d_wz * self.s2 ** 2 / den ** 2)) * 2.0 * t[IT]
        g = -g
        value = -(w @ (li + colour + log_nz)) + hyperprior_terms(t, eta, IE, WALK, PRIOR, self.centre, WIDTH, g)
        return value, (g * COORD.slope(t))[self.free]


def fit(lik, start, gtol):
    res = bfgs(lik, COORD.to_internal(start)[lik.free], gtol)
    return COORD.to_external(lik.full(res.x)), res


everyone = lambda fixed=theta_r: Likelihood(np.arange(N), np.ones(N), fixed, CENTRE)

# The likelihood itself, at rungcal's optimum (a fresh evaluation on both sides).
value, grad = everyone()(COORD.to_internal(theta_r)[FREE])
t0 = time.perf_counter()
for _ in range(5):
    everyone()(COORD.to_internal(theta_r)[FREE])
numpy_eval_ms = (time.perf_counter() - t0) / 5 * 1e3
nll_r = get("neg_log_likelihood")
print(f"stars {N}, relations {', '.join(relations)}, hierarchical joint likelihood, smooth histogram ({NB} bins of "
      f"{H} mag), outlier ({LAW} parallax law) and coloured rising-blend mixture (blend ratios free), sigma_int per relation, rho free, "
      f"E(B-V) and [Fe/H] errors")
print(f"-ln L at rungcal's optimum: rungcal {nll_r:.10f}, numpy {value:.10f} (difference {value - nll_r:.2e})")
print(f"gradient there (free parameters, solver coordinates): max |rungcal - numpy| = "
      f"{np.max(np.abs(grad - grad_r[FREE])):.2e} (max |g| rungcal {np.max(np.abs(grad_r[FREE])):.2e})")

# An independent start: per relation a magnitude-space line through the stars with parallax
# S/N > 10, scatter 0.1, rho 0, fractions 0.02, grey blends (ratios 1), the blend prior's
# centre, a flat histogram, the [Fe/H] sample's moments; the fixed parameters at rungcal's
# values.
good = PLX > 10.0 * np.sqrt(VP)
start = theta_r.copy()
design = np.column_stack([np.ones(good.sum()), X[good, 0], FEH[good]])
for k in range(R):
    design[:, 1] = X[good, k]
    start[[IA[k], IBETA[k], IG[k]]] = np.linalg.lstsq(design, M0[good, k] - (10.0 - 5.0 * np.log10(PLX[good])),
                                                       rcond=None)[0]
start[IS], start[IR], start[IO], start[IF], start[IFB] = 0.1, 0.0, 0.0, 0.02, 0.02
start[IE] = 0.0
start[IK] = 1.0
start[PRIOR] = CENTRE[PRIOR]
start[IZ], start[IT] = FEH.mean(), np.sqrt(max(FEH.var() - VFEH.mean(), 0.05 ** 2))
# Grey blends first, then the ratios freed: from grey start values BFGS's first steps let the
# blend fraction collapse, after which the ratios have nothing to measure and wander off
# (measured on this mock from the start above: ratios 17 and 80, blend_fraction 0, -ln L 27
# above rungcal's optimum).
full = everyone()
t0 = time.perf_counter()
grey = Likelihood(np.arange(N), np.ones(N), start, CENTRE, np.setdiff1d(FREE, IK))
theta_s, res = fit(full, fit(grey, start, 1e-5)[0], 1e-7)
full.evaluations += grey.evaluations
full_s = time.perf_counter() - t0
print(f"-ln L at scipy's own optimum: {res.fun:.10f} (rungcal's {nll_r:.10f})")
check = np.concatenate((IA, IBETA, IG, IS, [IR, IO], IK))
rel = np.abs(theta_s[check] / theta_r[check] - 1)
print(f"full sample (scipy BFGS from its own start: {res.nit} iterations, {full.evaluations} evaluations, "
      f"{full_s:.1f} s, max |gradient| {np.max(np.abs(res.jac)):.1e}, '{res.message}';\n"
      f"             rungcal {int(get('full_iterations'))} iterations, the relations' own fits, joint fit and "
      f"covariance {get('rungcal_fit_ms') / 1e3:.1f} s):")
for j, rj in zip(check, rel):
    print(f"  {names[j]:20s} rungcal {theta_r[j]: .10f}  scipy {theta_s[j]: .10f}  rel {rj:.1e}")
print(f"  also: outlier_fraction {theta_r[IF]:.6f} / {theta_s[IF]:.6f}, blend_fraction {theta_r[IFB]:.6f} / "
      f"{theta_s[IFB]:.6f}, blend_scale {theta_r[IBS]:.6f} / {theta_s[IBS]:.6f}, feh_spread {theta_r[IT]:.6f} / "
      f"{theta_s[IT]:.6f}, max |eta difference| {np.max(np.abs(theta_r[IE] - theta_s[IE])):.1e}")
worst = np.max(rel)
print(f"full-sample optimum agrees to {worst:.1e} relative in every alpha, beta, gamma, sigma_int, rho, the "
      f"offset and the blend ratios (target 1e-6)")
if not worst <= 1e-6:
    print("FAIL: the optima differ by more than 1e-6 relative; no timing")
    sys.exit(1)

# Resamples as rungcal's joint bootstrap: stars drawn with replacement, a repeated star kept
# once with its count as weight (time_resamples), every prior's centre redrawn from its
# Gaussian, the solve
# started at the full optimum and stopped when the largest gradient component is below 1e-4
# (rungcal instead stops at 0.01 of the gradient in the full sample's metric, or on a relative
# cost change below 1e-9, which scipy's BFGS does not offer).
def solve_resample(rows, weights, rng):
    centre = CENTRE.copy()
    centre[PRIOR] += WIDTH[PRIOR] * rng.standard_normal(len(PRIOR))
    lik = Likelihood(rows, weights, theta_s, centre)
    nit = fit(lik, theta_s, 1e-4)[1].nit
    return lik.evaluations, nit


times, evals, iters = time_resamples(N, scipy_resamples, solve_resample)
report_times(info, times, evals, iters, numpy_eval_ms, "rungcal joint bootstrap", f"{N} stars x {R} relations")
