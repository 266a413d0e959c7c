// SPDX-License-Identifier: MIT
// rungcal._rungcal: the compiled half of the Python package rungcal (python/rungcal/), a
// thin binding over the library; the package turns its columns and JSON into Python objects.
#include <pybind11/pybind11.h>

#include "bindings.hpp"
#include "rungcal/core/version.hpp"

PYBIND11_MODULE(_rungcal, m) {
  m.doc() = "rungcal library binding (use the package rungcal, not this module)";
  m.attr("software_version") = rungcal::software_version();
  m.attr("software_commit") = rungcal::software_commit();
  rungcal::python::bind_errors(m);
  rungcal::python::bind_calibration(m);
  rungcal::python::bind_store(m);
  rungcal::python::bind_tables(m);
  rungcal::python::bind_stages(m);
}
