// SPDX-License-Identifier: MIT
#include "rungcal/calibration/diff.hpp"

#include <algorithm>
#include <cmath>
#include <set>

#include <fmt/format.h>

namespace rungcal {
namespace {

const FitRelationRecord* find_by_name(const std::vector<FitRelationRecord>& relations,
                                      const std::string& name) {
  for (const auto& r : relations)
    if (r.name == name) return &r;
  return nullptr;
}

std::set<std::string> used_ids(const FitRelationRecord& relation) {
  return {relation.used.begin(), relation.used.end()};
}

}  // namespace

double CalibrationDiff::max_shift_in_sigma() const {
  double m = 0;
  for (const auto& s : shifts)
    if (std::isfinite(s.shift_in_sigma)) m = std::max(m, std::abs(s.shift_in_sigma));
  return m;
}

CalibrationDiff diff_calibrations(const Calibration& a, const Calibration& b) {
  CalibrationDiff d;
  d.from_label = a.label();
  d.to_label = b.label();
  const std::vector<FitRelationRecord> relations_a = fit_relations(a.fit());
  for (const FitRelationRecord& rb : fit_relations(b.fit())) {
    const std::string& rel = rb.name;
    const FitRelationRecord* ra = find_by_name(relations_a, rel);
    if (!ra) continue;
    for (const FitParameterRecord& pb : rb.parameters) {
      const FitParameterRecord* pa = ra->find_parameter(pb.name);
      if (!pa) continue;
      ParameterShift s;
      s.relation = rel;
      s.parameter = pb.name;
      s.from = pa->value;
      s.to = pb.value;
      s.from_error = pa->error_or_nan();
      s.to_error = pb.error_or_nan();
      s.shift = s.to - s.from;
      const double combined = std::hypot(s.from_error, s.to_error);
      s.shift_in_sigma = combined > 0 ? s.shift / combined : NAN;
      d.shifts.push_back(s);
    }
    std::set<std::string> ua = used_ids(*ra), ub = used_ids(rb);
    std::vector<std::string> in, out;
    std::set_difference(ub.begin(), ub.end(), ua.begin(), ua.end(), std::back_inserter(in));
    std::set_difference(ua.begin(), ua.end(), ub.begin(), ub.end(), std::back_inserter(out));
    if (!in.empty()) d.entered.emplace_back(rel, in);
    if (!out.empty()) d.left.emplace_back(rel, out);
  }
  // Inputs pair up by position (the stage writes them in a fixed order), else by path.
  const std::vector<InputRecord> ia = provenance_from_json(a.fit().at(fit_key::kProvenance)).inputs;
  const std::vector<InputRecord> ib = provenance_from_json(b.fit().at(fit_key::kProvenance)).inputs;
  for (std::size_t i = 0; i < std::max(ia.size(), ib.size()); ++i) {
    InputChange c;
    if (i >= ia.size())
      c = {"added", ib[i].path, "", ib[i].sha256};
    else if (i >= ib.size())
      c = {"removed", ia[i].path, ia[i].sha256, ""};
    else if (ia[i].sha256 != ib[i].sha256)
      c = {"changed", ib[i].path, ia[i].sha256, ib[i].sha256};
    else
      continue;
    d.inputs.push_back(c);
  }
  d.config_changed = a.document.value(calibration_key::kConfigText, "") !=
                     b.document.value(calibration_key::kConfigText, "");
  return d;
}

std::string format_diff(const CalibrationDiff& d) {
  std::string out = fmt::format("{} -> {}\n", d.from_label, d.to_label);
  out += fmt::format("  {:<8} {:<22} {:>19} {:>19} {:>10} {:>8}\n", "relation", "parameter", "from",
                     "to", "shift", "sigma");
  for (const auto& s : d.shifts) {
    auto value = [](double v, double e) {
      return std::isfinite(e) && e > 0 ? fmt::format("{:.4f} +- {:.4f}", v, e)
                                       : fmt::format("{:.4f}", v);
    };
    out += fmt::format(
        "  {:<8} {:<22} {:>19} {:>19} {:>+10.4f} {:>8}\n", s.relation, s.parameter,
        value(s.from, s.from_error), value(s.to, s.to_error), s.shift,
        std::isfinite(s.shift_in_sigma) ? fmt::format("{:+.2f}", s.shift_in_sigma) : "-");
  }
  for (const auto& c : d.inputs)
    out += fmt::format("  input {}: {} ({} -> {})\n", c.what, c.path, c.from_sha256.substr(0, 12),
                       c.to_sha256.substr(0, 12));
  if (d.config_changed) out += "  config changed\n";
  for (const auto& [rel, ids] : d.entered) {
    std::string list;
    for (const auto& id : ids) list += (list.empty() ? "" : ", ") + id;
    out += fmt::format("  {}: {} stars entered: {}\n", rel, ids.size(), list);
  }
  for (const auto& [rel, ids] : d.left) {
    std::string list;
    for (const auto& id : ids) list += (list.empty() ? "" : ", ") + id;
    out += fmt::format("  {}: {} stars left: {}\n", rel, ids.size(), list);
  }
  if (d.inputs.empty() && !d.config_changed && d.entered.empty() && d.left.empty() &&
      d.max_shift_in_sigma() == 0)
    out += "  no difference\n";
  return out;
}

}  // namespace rungcal
