// SPDX-License-Identifier: MIT
#include <exception>
#include <string>

#include "bindings.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_lock.hpp"

namespace py = pybind11;

namespace rungcal::python {
namespace {

// Raises the package's exception class `name` (rungcal/_errors.py) built from its arguments.
template <typename... Args>
void raise_package_error(const char* name, Args&&... args) {
  py::object type = py::module_::import("rungcal._errors").attr(name);
  py::object error = type(std::forward<Args>(args)...);
  PyErr_SetObject(type.ptr(), error.ptr());
}

}  // namespace

void bind_errors(py::module_& m) {
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const InputError& e) {
      const InputLocation& w = e.where();
      py::object row = w.row ? py::object(py::int_(*w.row)) : py::object(py::none());
      raise_package_error("InputError", e.what(), e.rule(), w.file, w.column, row, e.detail());
    } catch (const BusyError& e) {
      raise_package_error("BusyError", e.what());
    }
  });
  m.def(
      "format_input_error",
      [](const std::string& file, const std::string& key, const std::string& rule,
         const std::string& message) {
        return format_input_error({file, {}, key, "row", "key"}, rule, message);
      },
      py::arg("file"), py::arg("key"), py::arg("rule"), py::arg("message"),
      "The message an InputError carries, as the library formats it");
  m.def(
      "exit_code_name", [](int code) { return exit_code_name(static_cast<ExitCode>(code)); },
      "The short name of a stage exit code (docs/exit-codes.md).");
}

}  // namespace rungcal::python
