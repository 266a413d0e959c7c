// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

namespace rungcal {

// The files a stage reads and writes, as its options name them. Each stage declares them
// once, beside its options (`StageFiles declared_files(const XOptions&)`), and both the stage
// and rungcal-run use that declaration: rungcal-run keys a stage by every input declared and
// checks every product declared, so a file the stage reads cannot be left out of its key
// (issue 18: the fit's zero-point table once was). Declaring reads no data: at most the
// configs or the store's 'latest' link that name the files (the grid, the report, apply).
struct StageFiles {
  std::vector<std::string> inputs;       // files it reads (a missing one keys as missing)
  std::vector<std::string> input_globs;  // patterns whose every match it reads (one file per star)
  std::vector<std::string> outputs;      // files it writes
  // A folder it owns, whose file names it decides as it runs: every file there is its
  // product (the report's tables and figures). "" = none.
  std::string output_folder;
  // A folder it adds to without owning it, shared with other writers (a store's new
  // versions): not a product to check, but what it changes. "" = none.
  std::string adds_to;

  // Adds another declaration's inputs and input globs, once each: a stage that runs another
  // stage's work (the grid reruns deredden and fit) reads what that stage reads.
  void add_inputs_of(const StageFiles& other);
  // Adds a file to the inputs unless it is "" (an optional file the options leave out) or
  // listed already.
  void add_input(const std::string& path);
  // Takes a file out of the inputs: one the caller supplies itself in its place.
  void drop_input(const std::string& path);
};

// The regular files a glob(3) pattern matches now, sorted; none is no error here (the stage
// that reads them says so when it runs).
std::vector<std::string> files_matching(const std::string& pattern);

// Every input file now: the inputs, then each glob's matches, each file once.
std::vector<std::string> input_files_now(const StageFiles& files);

}  // namespace rungcal
