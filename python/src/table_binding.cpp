// SPDX-License-Identifier: MIT
// Product tables and JSON files as the library reads them, handed to the package as plain
// data: each column's values (a numpy array, or a list for text), null flags, unit and
// description, and the header keywords; JSON as text for Python's json module.
#include <pybind11/numpy.h>
#include <pybind11/stl.h>

#include <string>
#include <variant>

#include "bindings.hpp"
#include "column_types.hpp"
#include "rungcal/calibration/calibration.hpp"
#include "rungcal/core/json_io.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/table_source.hpp"
#include "rungcal/table/text_io.hpp"

namespace py = pybind11;

namespace rungcal::python {
namespace {

py::object column_values(const Column& c) {
  switch (c.type) {
    case ColumnType::kReal:
      return py::array_t<double>(static_cast<py::ssize_t>(c.real.size()), c.real.data());
    case ColumnType::kInteger:
      return py::array_t<std::int64_t>(static_cast<py::ssize_t>(c.integer.size()),
                                       c.integer.data());
    case ColumnType::kBoolean: {
      py::array_t<bool> out(static_cast<py::ssize_t>(c.boolean.size()));
      auto o = out.mutable_unchecked<1>();
      for (std::size_t r = 0; r < c.boolean.size(); ++r)
        o(static_cast<py::ssize_t>(r)) = c.boolean[r] != 0;
      return out;
    }
    case ColumnType::kText:
      return py::cast(c.text);
  }
  return py::none();
}

py::dict column_dict(const Column& c) {
  py::dict d;
  d["name"] = c.name;
  d["type"] = column_type_name(c.type);
  d["unit"] = c.unit;
  d["description"] = c.description;
  d["values"] = column_values(c);
  py::array_t<bool> null(static_cast<py::ssize_t>(c.size()));
  auto n = null.mutable_unchecked<1>();
  for (std::size_t r = 0; r < c.size(); ++r) n(static_cast<py::ssize_t>(r)) = c.is_null(r);
  d["null"] = null;
  return d;
}

py::dict table_dict(const SourceTable& source, bool type_text_columns) {
  py::dict d;
  d["file"] = source.file;
  py::list columns, header;
  for (std::size_t i = 0; i < source.table.columns(); ++i) {
    const Column& c = source.table.column(i);
    columns.append(
        column_dict(type_text_columns && c.type == ColumnType::kText ? typed_from_text(c) : c));
  }
  for (const Keyword& k : source.table.header())
    header.append(py::make_tuple(
        k.key, std::visit([](const auto& v) { return py::cast(v); }, k.value), k.comment));
  d["columns"] = columns;
  d["header"] = header;
  d["unusable_columns"] = source.unusable_columns;
  return d;
}

}  // namespace

void bind_tables(py::module_& m) {
  m.def(
      "read_fits_table",
      [](const std::string& path, const std::string& hdu_name, int hdu_index) {
        return table_dict(read_fits_table(path, {hdu_name, hdu_index}), false);
      },
      py::arg("path"), py::arg("hdu_name") = "", py::arg("hdu_index") = 0);
  m.def(
      "read_csv_table",
      [](const std::string& path) {
        return table_dict(read_text_table(path, TextReadOptions{}), true);
      },
      py::arg("path"));
  m.def("has_fits_extension", &has_fits_extension, py::arg("path"));
  m.def(
      "read_json_text", [](const std::string& path) { return read_json_file(path).dump(); },
      py::arg("path"), "A JSON file as rungcal reads it (depth and syntax checked), as text");
  m.def(
      "read_fit_text",
      [](const std::string& path) {
        const nlohmann::json fit = read_json_file(path);
        check_fit_document(fit, path);
        return fit.dump();
      },
      py::arg("path"),
      "A rungcal-fit result, checked as publish, diff and apply check it, as JSON text");
}

}  // namespace rungcal::python
