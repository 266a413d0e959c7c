// SPDX-License-Identifier: MIT
// Runs a stage's own main from an argument vector inside this process: the command line's
// parsing, checks and products, with what it prints on stdout captured and the failure it
// stopped on (rule, file, key) handed back rather than only logged.
#include <pybind11/stl.h>
#include <unistd.h>

#include <cstdio>
#include <string>
#include <vector>

#include "bindings.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/stage_failure.hpp"
#include "stage_table.hpp"

namespace py = pybind11;

namespace rungcal::python {
namespace {

StageMain find_stage(const std::string& stage) {
  std::string known;
  for (const StageEntry& e : stage_table()) {
    if (stage == e.stage) return e.main;
    known += (known.empty() ? "" : ", ") + std::string(e.stage);
  }
  throw InputError({{}, {}, "stage", "row", "argument"}, "unknown_stage",
                   "no stage '" + stage + "'; the stages are " + known);
}

// Sends file descriptor 1 to a temporary file for the object's life, then puts it back.
class CapturedStdout {
 public:
  CapturedStdout() : file_(std::tmpfile()) {
    std::fflush(stdout);
    saved_ = ::dup(STDOUT_FILENO);
    if (file_ && saved_ >= 0) ::dup2(::fileno(file_), STDOUT_FILENO);
  }
  ~CapturedStdout() {
    restore();
    if (file_) std::fclose(file_);
  }
  CapturedStdout(const CapturedStdout&) = delete;
  CapturedStdout& operator=(const CapturedStdout&) = delete;

  // Restores stdout and returns what was written meanwhile.
  std::string text() {
    restore();
    std::string out;
    if (!file_) return out;
    std::rewind(file_);
    char buffer[4096];
    for (std::size_t n; (n = std::fread(buffer, 1, sizeof buffer, file_)) > 0;)
      out.append(buffer, n);
    return out;
  }

 private:
  void restore() {
    if (saved_ < 0) return;
    std::fflush(stdout);
    ::dup2(saved_, STDOUT_FILENO);
    ::close(saved_);
    saved_ = -1;
  }
  std::FILE* file_;
  int saved_ = -1;
};

py::object failure_dict(const std::optional<StageFailure>& f) {
  if (!f) return py::none();
  py::dict d;
  d["rule"] = f->rule;
  d["file"] = f->where.file;
  d["key"] = f->where.column;
  d["row"] = f->where.row ? py::object(py::int_(*f->where.row)) : py::object(py::none());
  d["detail"] = f->detail;
  d["message"] = f->message;
  return d;
}

// (exit code, stdout text, failure or None) of `rungcal-<stage> arguments...`.
py::tuple run_stage_main(const std::string& stage, const std::vector<std::string>& arguments) {
  const StageMain stage_main = find_stage(stage);
  std::vector<std::string> words = {"rungcal-" + stage};
  words.insert(words.end(), arguments.begin(), arguments.end());
  std::vector<char*> argv;
  for (std::string& w : words) argv.push_back(w.data());
  argv.push_back(nullptr);
  take_stage_failure();  // forget any earlier run's
  int code = 0;
  std::string out;
  {
    py::gil_scoped_release release;
    CapturedStdout captured;
    code = stage_main(static_cast<int>(words.size()), argv.data());
    out = captured.text();
  }
  return py::make_tuple(code, out, failure_dict(take_stage_failure()));
}

}  // namespace

void bind_stages(py::module_& m) {
  m.def("run_stage_main", &run_stage_main, py::arg("stage"), py::arg("arguments"));
  m.def("stage_names", [] {
    std::vector<std::string> out;
    for (const StageEntry& e : stage_table()) out.emplace_back(e.stage);
    return out;
  });
}

}  // namespace rungcal::python
