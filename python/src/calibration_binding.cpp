// SPDX-License-Identifier: MIT
// Calibrations: loading by any reference, the document as JSON text, and predictions for
// one-dimensional arrays (the package broadcasts its arguments to that first).
#include <pybind11/numpy.h>
#include <pybind11/stl.h>

#include <cmath>
#include <optional>
#include <string>

#include "bindings.hpp"
#include "rungcal/calibration/calibration.hpp"
#include "rungcal/calibration/calibration_reference.hpp"
#include "rungcal/calibration/target_modulus.hpp"
#include "rungcal/core/error.hpp"

namespace py = pybind11;

namespace rungcal::python {
namespace {

using Array = py::array_t<double, py::array::c_style | py::array::forcecast>;

// Arrays handed on together must have one length each (else InputError "shape_mismatch").
void require_same_length(const Calibration& cal, std::initializer_list<const Array*> arrays) {
  const py::ssize_t n = (*arrays.begin())->size();
  for (const Array* a : arrays)
    if (a->ndim() != 1 || a->size() != n)
      throw InputError({cal.label(), {}, {}}, "shape_mismatch", "the arrays given differ in shape");
}

// A [Fe/H] that is not finite (NaN: missing) is none, as rungcal-apply reads a target's.
std::optional<double> feh_or_none(double feh) {
  return std::isfinite(feh) ? std::optional<double>(feh) : std::nullopt;
}

py::tuple absolute_magnitudes(const Calibration& cal, const std::string& relation,
                              const Array& log_period, const Array& feh) {
  cal.relation(relation);  // an unknown relation stops even an empty call
  require_same_length(cal, {&log_period, &feh});
  Array value(log_period.size()), error(log_period.size());
  auto p = log_period.unchecked<1>();
  auto f = feh.unchecked<1>();
  auto v = value.mutable_unchecked<1>();
  auto e = error.mutable_unchecked<1>();
  for (py::ssize_t i = 0; i < p.shape(0); ++i) {
    const Prediction pred = predict_absolute_magnitude(cal, relation, p(i), feh_or_none(f(i)));
    v(i) = pred.abs_mag;
    e(i) = pred.calibration_error;
  }
  return py::make_tuple(value, error);
}

py::tuple distance_moduli(const Calibration& cal, const std::string& relation, const Array& m0,
                          const Array& log_period, const Array& feh, const Array& m0_err) {
  cal.relation(relation);
  require_same_length(cal, {&m0, &log_period, &feh, &m0_err});
  Array mu(m0.size()), stat(m0.size()), calib(m0.size());
  auto m = m0.unchecked<1>();
  auto p = log_period.unchecked<1>();
  auto f = feh.unchecked<1>();
  auto me = m0_err.unchecked<1>();
  auto out_mu = mu.mutable_unchecked<1>();
  auto out_stat = stat.mutable_unchecked<1>();
  auto out_cal = calib.mutable_unchecked<1>();
  for (py::ssize_t i = 0; i < m.shape(0); ++i) {
    const TargetModulus t =
        distance_modulus_from_calibration(cal, relation, p(i), m(i), me(i), feh_or_none(f(i)));
    out_mu(i) = t.mu;
    out_stat(i) = t.stat_error;
    out_cal(i) = t.calibration_error;
  }
  return py::make_tuple(mu, stat, calib);
}

}  // namespace

void bind_calibration(py::module_& m) {
  py::class_<Calibration>(m, "CalibrationCore",
                          "A loaded calibration (wrapped by rungcal.Calibration)")
      .def_property_readonly("name", &Calibration::name)
      .def_property_readonly("version", &Calibration::version)
      .def_property_readonly("label", &Calibration::label)
      .def_property_readonly("relation_names", &Calibration::relation_names)
      .def("content_sha256", &Calibration::content_sha256)
      .def("document_json", [](const Calibration& c) { return c.document.dump(); })
      .def("absolute_magnitudes", &absolute_magnitudes, py::arg("relation"), py::arg("log_period"),
           py::arg("feh"))
      .def("distance_moduli", &distance_moduli, py::arg("relation"), py::arg("m0"),
           py::arg("log_period"), py::arg("feh"), py::arg("m0_err"));
  m.def("load_calibration", &load_calibration_reference, py::arg("reference"),
        "STORE/NAME@latest, STORE/NAME@N, a version folder or a calibration file");
}

}  // namespace rungcal::python
