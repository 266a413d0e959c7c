// SPDX-License-Identifier: MIT
// A calibration store as data: versions, 'latest', withdrawn versions, and the diff of two
// versions with the fields rungcal-diff prints.
#include <pybind11/stl.h>

#include <string>

#include "bindings.hpp"
#include "rungcal/calibration/diff.hpp"
#include "rungcal/calibration/store.hpp"

namespace py = pybind11;
using namespace pybind11::literals;

namespace rungcal::python {
namespace {

py::dict shift_dict(const ParameterShift& s) {
  return py::dict("relation"_a = s.relation, "parameter"_a = s.parameter, "from"_a = s.from,
                  "to"_a = s.to, "from_error"_a = s.from_error, "to_error"_a = s.to_error,
                  "shift"_a = s.shift, "shift_in_sigma"_a = s.shift_in_sigma);
}

py::dict input_dict(const InputChange& c) {
  return py::dict("what"_a = c.what, "path"_a = c.path, "from_sha256"_a = c.from_sha256,
                  "to_sha256"_a = c.to_sha256);
}

py::dict diff_dict(const CalibrationDiff& diff) {
  py::dict d;
  d["from"] = diff.from_label;
  d["to"] = diff.to_label;
  py::list shifts, inputs;
  for (const auto& s : diff.shifts) shifts.append(shift_dict(s));
  for (const auto& c : diff.inputs) inputs.append(input_dict(c));
  d["shifts"] = shifts;
  d["inputs"] = inputs;
  d["config_changed"] = diff.config_changed;
  py::dict entered, left;
  for (const auto& [relation, ids] : diff.entered) entered[py::str(relation)] = ids;
  for (const auto& [relation, ids] : diff.left) left[py::str(relation)] = ids;
  d["entered"] = entered;
  d["left"] = left;
  d["max_shift_in_sigma"] = diff.max_shift_in_sigma();
  d["text"] = format_diff(diff);
  return d;
}

py::list withdrawn_list(const std::string& store, const std::string& name) {
  py::list out;
  for (const auto& w : withdrawn_versions(store, name))
    out.append(py::dict("version"_a = w.version, "content_sha256"_a = w.content_sha256,
                        "withdrawn_utc"_a = w.withdrawn_utc));
  return out;
}

}  // namespace

void bind_store(py::module_& m) {
  m.def("calibration_versions", &calibration_versions, py::arg("store"), py::arg("name"));
  m.def("latest_version", &latest_version, py::arg("store"), py::arg("name"));
  m.def("withdrawn_versions", &withdrawn_list, py::arg("store"), py::arg("name"));
  m.def(
      "diff_versions",
      [](const std::string& store, const std::string& from, const std::string& to) {
        return diff_dict(
            diff_calibrations(load_calibration(store, from), load_calibration(store, to)));
      },
      py::arg("store"), py::arg("from_reference"), py::arg("to_reference"));
}

}  // namespace rungcal::python
