// SPDX-License-Identifier: MIT
// Mock calibrator samples with known truth, for simulation tests of the fit.
#pragma once

#include <algorithm>
#include <cmath>
#include <string>

#include "rungcal/core/random.hpp"
#include "rungcal/photometry/photometry.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/plfit/model.hpp"
#include "rungcal/table/star_table.hpp"

namespace rungcal::test {

struct MockTruth {
  double alpha = -5.8, beta = -3.3, offset = -0.02, sigma = 0.08;
  double beta_long = 0.0, break_x = 0.3;  // extra slope above x = break_x (log P - log P0)
  double gamma = 0.0, feh_sigma = 0.0;    // metallicity term and the spread of [Fe/H]
};

struct MockSample {
  FitData data;
  MockTruth truth;
};

// Parallax calibrators spread over a disk out to max_kpc, parallax errors between
// plx_err_min and plx_err_max (mas), photometric error 0.02 mag; a share of outliers made
// 1 mag too bright.
inline MockSample mock_parallax_sample(std::uint64_t seed, int n, double outlier_fraction = 0.05,
                                       double max_kpc = 6.0, double plx_err_min = 0.02,
                                       double plx_err_max = 0.05, MockTruth truth = {}) {
  MockSample m;
  m.truth = truth;
  Random rng(seed);
  auto& p = m.data.parallax;
  p.x.resize(n), p.xl.setZero(n), p.feh.setZero(n), p.m0.resize(n), p.var_m.resize(n);
  m.data.plx.resize(n), m.data.var_plx.resize(n);
  for (int i = 0; i < n; ++i) {
    double x = rng.uniform(-0.6, 0.8);
    double d_kpc = 0.5 + (max_kpc - 0.5) * std::sqrt(rng.uniform());
    double mu = distance_modulus_from_parsec(d_kpc * 1e3);
    double sm = 0.02, sp = rng.uniform(plx_err_min, plx_err_max);
    double xl = std::max(0.0, x - truth.break_x),
           feh = truth.feh_sigma > 0 ? rng.normal(0, truth.feh_sigma) : 0.0;
    double mag = truth.alpha + truth.beta * x + truth.beta_long * xl + truth.gamma * feh +
                 rng.normal(0, truth.sigma) + mu + rng.normal(0, sm);
    if (rng.uniform() < outlier_fraction) mag -= 1.0;
    p.x[i] = x, p.xl[i] = xl, p.feh[i] = feh, p.m0[i] = mag, p.var_m[i] = sm * sm;
    p.row.push_back(static_cast<std::size_t>(i));
    m.data.plx[i] = 1.0 / d_kpc + truth.offset + rng.normal(0, sp);
    m.data.var_plx[i] = sp * sp;
  }
  return m;
}

// The columns rungcal-fit reads, for a mock sample's stars: relation band "X" (mag0_X).
inline StarTable catalog_from_mock(const MockSample& m) {
  StarTable t;
  for (const char* c : {"id", "mode", "pulsator_class"}) t.add_column(c, ColumnType::kText);
  for (const char* c : {"log_period", "mag0_X", "mag0_err_X", "parallax_mas", "parallax_err_mas"})
    t.add_column(c, ColumnType::kReal);
  for (Eigen::Index i = 0; i < m.data.parallax.size(); ++i) {
    t.column("id").push_text("S" + std::to_string(i));
    t.column("mode").push_text("fundamental");
    t.column("pulsator_class").push_text("classical_cepheid");
    t.column("log_period").push_real(m.data.parallax.x[i] + 1.0);
    t.column("mag0_X").push_real(m.data.parallax.m0[i]);
    t.column("mag0_err_X").push_real(std::sqrt(m.data.parallax.var_m[i]));
    t.column("parallax_mas").push_real(m.data.plx[i]);
    t.column("parallax_err_mas").push_real(std::sqrt(m.data.var_plx[i]));
  }
  return t;
}

// Fit options for a mock catalog (catalog_from_mock): one relation "X", no loss, the
// stage's other defaults (the hierarchical likelihood).
inline FitOptions mock_fit_options() {
  FitOptions o;
  o.input_path = "mock.fits";
  o.loss = LossKind::kNone;
  RelationOptions r;
  r.name = r.band = "X";
  o.relations.push_back(r);
  return o;
}

}  // namespace rungcal::test
