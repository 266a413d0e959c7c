#!/usr/bin/python3
# SPDX-License-Identifier: MIT
"""A linearised stand-in for the hierarchical fit, to see where sigma_int's bias comes from.

Not the fit: each star's latent modulus is integrated out under a flat prior with the parallax
linearised about the modulus its magnitude implies, so a star's likelihood is a Gaussian in
the parallax with variance sigma_pi^2 + (d pi / d mu)^2 V, V = sigma_int^2 + 0.02^2. The
mocks are rungcal-study's Wesenheit ones (lib/rungcal/simulate/mock_catalog.cpp): sigma_int
0.08, parallax errors 0.012 + 0.06 10^(0.4 (m - 15)) mas, distances on the disk or flat in mu,
and parallax outliers shifted by 5-20 of their errors. Seconds where the fit takes minutes,
it reproduces the study's sigma_int bias (docs/method.md) and lets one vary the outlier law.

  sigma_int_toy.py outliers --distances flat --stars 3000 --mocks 40 --width 1 --factor 10
  sigma_int_toy.py outliers ... --law mock   (the outlier component is the mocks' own law)
  sigma_int_toy.py outliers ... --law rising [--fit-factor]   (rungcal's default from 2026-12-04; F held at 10 unless fitted)
  sigma_int_toy.py outliers ... --law quartic --fit-factor --factor 6   (rungcal's default since 2026-12-05)
  sigma_int_toy.py outliers ... --law rising --fit-factor --floor 0 --outlier-fraction 0
  sigma_int_toy.py reml --distances disk --stars 300 --mocks 200
"""
import argparse

import numpy as np
from scipy.optimize import minimize

SIGMA_INT, MAG_ERR, OFFSET = 0.08, 0.02, -0.010
C = 0.2 * np.log(10.0)  # d ln pi / d mu


def draw_distances_kpc(kind, n, rng):
    if kind == "flat":
        return 10 ** (0.2 * rng.uniform(8.5, 13.5, n) - 2)
    out = []
    while len(out) < n:  # Gamma(2, 2.5 kpc) kept in 0.3-8 kpc, as the mocks' disk
        d = -2.5 * (np.log(1 - rng.uniform()) + np.log(1 - rng.uniform()))
        if 0.3 < d < 8:
            out.append(d)
    return np.array(out)


def draw_mock(kind, n, outlier_fraction, rng):
    d = draw_distances_kpc(kind, n, rng)
    mu = 5 * np.log10(d * 1e3) - 5
    x, z = rng.uniform(0.4, 1.6, n) - 1, rng.normal(0, 0.15, n)
    abs_mag = -5.9 - 3.3 * x - 0.2 * z
    m = abs_mag + mu + rng.normal(0, SIGMA_INT, n) + rng.normal(0, MAG_ERR, n)
    err = 0.012 + 0.06 * 10 ** (0.4 * (m - 15))
    plx = 1 / d + OFFSET + rng.normal(0, err)
    bad = rng.uniform(size=n) < outlier_fraction
    plx[bad] += np.where(rng.uniform(size=bad.sum()) < 0.5, -1, 1) * rng.uniform(5, 20, bad.sum()) * err[bad]
    return dict(m=m, x=x, z=z, abs_mag=abs_mag, plx=plx, err=err)


def gauss_log(r, var):
    return -0.5 * r * r / var - 0.5 * np.log(var)


def rising_log(r, s2, v):
    """ln of (e^2 / s^2) N(e | 0, s^2) convolved with N(0, v), at r: the Gaussian N(r | 0,
    s^2 + v) times E[e^2 | r] / s^2, e | r being N(r s^2 / (s^2 + v), s^2 v / (s^2 + v))."""
    t = s2 + v
    m, w = r * s2 / t, s2 * v / t
    return gauss_log(r, t) + np.log((m * m + w) / s2)


def quartic_log(r, s2, v):
    """ln of (e^4 / 3 s^4) N(e | 0, s^2) convolved with N(0, v), at r: as rising_log, with
    E[e^4 | r] = m^4 + 6 m^2 w + 3 w^2."""
    t = s2 + v
    m, w = r * s2 / t, s2 * v / t
    return gauss_log(r, t) + np.log((m**4 + 6 * m * m * w + 3 * w * w) / (3 * s2 * s2))


def fit_outlier_mixture(s, args):
    """ML sigma_int and f with the relation and the offset held at the truth."""
    model_plx = 10 ** (-0.2 * (s["m"] - s["abs_mag"] - 10)) + OFFSET
    slope = C * (model_plx - OFFSET)
    r, err = s["plx"] - model_plx, s["err"]
    shifts = np.linspace(5, 20, 61)

    def factor(t):  # rungcal's ln(F - floor) when fitted
        return args.floor + np.exp(t[2]) if args.fit_factor else args.factor

    def nll(t):
        var = np.exp(2 * t[0]) + MAG_ERR**2
        f = 1 / (1 + np.exp(-t[1]))
        v_member = err**2 + slope**2 * var
        member = gauss_log(r, v_member)
        if args.law == "mock":  # parallax shifted by +-U(5, 20) errors, magnitude a member's
            terms = [gauss_log(r - sgn * k * err, v_member) for k in shifts for sgn in (-1, 1)]
            outlier = np.logaddexp.reduce(terms, axis=0) - np.log(len(terms))
        elif args.law == "rising":  # the member's magnitude term
            outlier = rising_log(r, (factor(t) * err) ** 2, v_member)
        elif args.law == "quartic":  # zero at e = 0 to fourth order, peaked at +-2 s
            outlier = quartic_log(r, (factor(t) * err) ** 2, v_member)
        else:
            outlier = gauss_log(r, (factor(t) * err) ** 2 + slope**2 * (var + args.width**2))
        return -np.sum(np.logaddexp(np.log(1 - f) + member, np.log(f) + outlier))

    start = [np.log(SIGMA_INT), -3.5] + ([np.log(args.factor - args.floor)] if args.fit_factor else [])
    t = minimize(nll, start, method="Nelder-Mead", options={"xatol": 1e-7, "fatol": 1e-9, "maxiter": 5000}).x
    return np.exp(t[0]), 1 / (1 + np.exp(-t[1])), factor(t)


def fit_relation(s, restricted):
    """ML sigma_int with alpha, beta, gamma and the offset free; restricted = 1 adds
    +0.5 ln det of the Fisher block of (alpha, beta, gamma), 2 of (alpha, beta, gamma, offset)."""
    design = np.column_stack([np.ones_like(s["x"]), s["x"], s["z"]])

    def nll(t):
        a, b, g, off, log_s = t
        var = np.exp(2 * log_s) + MAG_ERR**2
        true_plx = 10 ** (-0.2 * (s["m"] - (a + b * s["x"] + g * s["z"]) - 10))
        v = s["err"] ** 2 + (C * true_plx) ** 2 * var
        value = -np.sum(gauss_log(s["plx"] - true_plx - off, v))
        if restricted:
            jac = (C * true_plx)[:, None] * design  # d pi / d (alpha, beta, gamma)
            if restricted == 2:
                jac = np.column_stack([jac, np.ones_like(s["x"])])
            value += 0.5 * np.linalg.slogdet((jac / v[:, None]).T @ jac)[1]
        return value

    t = minimize(nll, [-5.9, -3.3, -0.2, OFFSET, np.log(SIGMA_INT)], method="Nelder-Mead",
                 options={"xatol": 1e-9, "fatol": 1e-10, "maxiter": 40000, "maxfev": 40000}).x
    return np.exp(t[4])


def summary(label, sigmas, mocks):
    sigmas = np.asarray(sigmas)
    print(f"{label}: mean sigma_int {sigmas.mean():.5f}, sd {sigmas.std():.5f}, "
          f"bias / sd {(sigmas.mean() - SIGMA_INT) / sigmas.std():+.2f} +- {1 / np.sqrt(mocks):.2f}")


def main():
    p = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("study", choices=["outliers", "reml"])
    p.add_argument("--distances", choices=["flat", "disk"], default="flat")
    p.add_argument("--stars", type=int, default=3000)
    p.add_argument("--mocks", type=int, default=40)
    p.add_argument("--outlier-fraction", type=float, default=0.03)
    p.add_argument("--law", choices=["gaussian", "rising", "quartic", "mock"], default="gaussian",
                   help="the fit's outlier component: rungcal's Gaussian, rising or quartic one, or the mocks' own law")
    p.add_argument("--width", type=float, default=1.0, help="outlier magnitude width (mag; Gaussian law)")
    p.add_argument("--factor", type=float, default=10.0, help="outlier parallax error factor (its start if fitted)")
    p.add_argument("--fit-factor", action="store_true", help="fit the factor, above --floor")
    p.add_argument("--floor", type=float, default=3.0, help="the fitted factor's lower bound")
    p.add_argument("--seed", type=int, default=5)
    args = p.parse_args()
    rng = np.random.default_rng(args.seed)
    if args.study == "outliers":
        fits = [fit_outlier_mixture(draw_mock(args.distances, args.stars, args.outlier_fraction, rng), args)
                for _ in range(args.mocks)]
        summary(f"{args.distances}, N = {args.stars}, law {args.law}, width {args.width}, factor {args.factor}"
                + (f" fitted above {args.floor}" if args.fit_factor else ""), [s for s, _, _ in fits], args.mocks)
        print(f"  mean outlier fraction {np.mean([f for _, f, _ in fits]):.4f} (truth {args.outlier_fraction}), "
              f"factor {np.mean([k for _, _, k in fits]):.2f} (sd {np.std([k for _, _, k in fits]):.2f})")
        return
    mocks = [draw_mock(args.distances, args.stars, 0.0, rng) for _ in range(args.mocks)]
    for restricted, label in [(0, "ML"), (1, "restricted (alpha, beta, gamma)"),
                              (2, "restricted (alpha, beta, gamma, offset)")]:
        summary(f"{args.distances}, N = {args.stars}, {label}", [fit_relation(s, restricted) for s in mocks],
                args.mocks)


if __name__ == "__main__":
    main()
