// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "rungcal/calibration/calibration.hpp"

namespace rungcal {

// A calibration's systematics from a systematics grid's error budget (rungcal-grid's
// grid.json, docs/file-formats.md "Systematics grid"). Each variant refits with one analysis
// choice changed; its parameter shifts Delta theta_v from the grid's baseline move a
// prediction M = g . theta by g . Delta theta_v, so a distance modulus mu = m - M by
//   delta_v = -g . Delta theta_v.
// The budget's own convention takes each shift as a one-sigma systematic and the variants as
// independent (shifts summed in quadrature within a category, categories in quadrature), so
//   sigma_sys^2 = sum_v delta_v^2,  Cov_sys(a, b) = sum_v delta_v(a) delta_v(b)
// for two predictions a and b (two stars, two hosts): each variant moves every prediction at
// once (linear propagation of fully correlated shifts; JCGM 102:2011, the law of propagation
// for several outputs, U_y = C U_x C^T, with U_x = sum_v Delta theta_v Delta theta_v^T).
// A variant that changes the extinction law or R_V (`changes_extinction` in the budget) moves
// the targets' dereddened magnitudes as well as the calibration; apply has the targets only
// as dereddened once, so such a variant's shift here is the calibration's alone (for a
// Wesenheit relation the two move the same way and largely cancel: it overstates). It is
// kept, with a warning, unless its category is left out (without_categories).
// A parameter the budget lists that a variant lacks (gamma in a variant without the
// metallicity term) is absent from that variant's model: its shift is -baseline. A parameter
// the budget does not list (fixed in the baseline) does not move.
struct SystematicShifts {
  std::string source;                    // where the budget was read (grid.json)
  std::vector<std::string> variants;     // variant names, in the budget's order
  std::vector<std::string> categories;   // each variant's category
  std::vector<bool> changes_extinction;  // the variant moves the targets' magnitudes too
  // Delta theta_v: [variant][parameter], the relation's parameter_names order.
  std::vector<std::vector<double>> shift;

  // delta_v = -g . Delta theta_v for each variant.
  std::vector<double> modulus_shifts(const std::vector<double>& gradient) const;
  // The same without the variants of these categories; InputError (rule "unknown_category",
  // naming `option`) for a category the budget does not have.
  SystematicShifts without_categories(const std::vector<std::string>& skip,
                                      const std::string& option) const;
};

// The shifts of one relation of `calibration` from a budget document. InputError naming
// `where` and the key: "budget_schema" (not a rungcal error budget, or a part missing or of
// the wrong type), "unknown_relation" (the budget has no relation of this name). Warns when
// the budget's baseline differs from the calibration by more than 0.1 of its error (the
// budget then describes another fit).
SystematicShifts systematic_shifts(const nlohmann::json& budget, const std::string& where,
                                   const Calibration& calibration, const std::string& relation);
// The same, read from a grid.json file.
SystematicShifts read_systematic_shifts(const std::string& path, const Calibration& calibration,
                                        const std::string& relation);

}  // namespace rungcal
