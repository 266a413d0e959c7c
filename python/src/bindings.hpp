// SPDX-License-Identifier: MIT
// The parts of the Python module rungcal._rungcal, one file each (module.cpp joins them).
#pragma once

#include <pybind11/pybind11.h>

namespace rungcal::python {

// InputError (and WriteError) -> rungcal.InputError with rule, file, row, key and detail;
// BusyError -> rungcal.BusyError.
void bind_errors(pybind11::module_& m);
// load_calibration and the Calibration class: document, predictions over arrays.
void bind_calibration(pybind11::module_& m);
// A store's versions, the withdrawn ones, 'latest', and the diff of two versions.
void bind_store(pybind11::module_& m);
// Product tables (FITS, CSV) as columns of numpy arrays with units; JSON files.
void bind_tables(pybind11::module_& m);
// A stage's main run from an argument vector inside this process.
void bind_stages(pybind11::module_& m);

}  // namespace rungcal::python
