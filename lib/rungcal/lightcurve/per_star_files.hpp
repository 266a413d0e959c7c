// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/core/provenance.hpp"
#include "rungcal/table/source_table.hpp"
#include "rungcal/table/table_source.hpp"

namespace rungcal {

// Light curves as surveys publish them: one file per star (often per band), the star id
// (and band) in the file name, often headerless whitespace columns (time mag err) with
// times such as HJD - 2450000. [source] path is then a glob ("lc/*.dat") and
// name_pattern names the parts of each file name ("{star}.{band}.dat").
struct PerStarFiles {
  std::string name_pattern;  // "" = path is one table; else with {star} and optionally {band}
  std::string band;          // every file's band when the name has no {band} ("" = a band column)
  double time_offset_d = 0;  // added to every time (2450000 for HJD - 2450000)

  bool enabled() const { return !name_pattern.empty(); }
  // "" when usable, else "field: rule".
  std::string check() const;
};

// The files a glob matches, sorted; InputError ("no_files") when none.
std::vector<std::string> per_star_file_list(const std::string& glob_pattern);

// Every matching file read as spec says (text or FITS), each row given the star (and band)
// its file name holds and the time offset, as one table with the columns star_column,
// band_column, time_column, mag_column and err_column; source rows are each file's own
// lines. A file name that does not match name_pattern stops with "file_name_pattern".
// inputs receives every file with its SHA-256 and rows.
struct LightCurveColumns {
  std::string star, time, band, mag, err;
};
SourceTable read_per_star_files(const TableSourceSpec& spec, const PerStarFiles& files,
                                const LightCurveColumns& columns, std::vector<InputRecord>& inputs);

}  // namespace rungcal
