// SPDX-License-Identifier: MIT
#pragma once

#include <string>
#include <vector>

#include "rungcal/core/config.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/source_table.hpp"
#include "rungcal/table/text_io.hpp"

namespace rungcal {

// Where a stage reads an input table from: a FITS binary table or a delimited text file.
struct TableSourceSpec {
  std::string path;         // resolved against the config's folder
  bool is_fits = false;     // from `format`, else from the file name's extension
  bool is_votable = false;  // format "votable", else a .vot/.xml/.votable name
  FitsHduChoice hdu;        // FITS only
  TextReadOptions text;     // text only: delimiter, header, comments, missing markers
  std::vector<std::string> array_columns;  // read into SourceTable::arrays (not text files)
};

// True for .fits, .fit, .fts and their .gz forms (any case).
bool has_fits_extension(const std::string& path);

// Reads a source table's keys: path (required), format ("fits", "text", "votable"; "ecsv"
// is text whose first line says ECSV), hdu, delimiter,
// header, header_prefix, comment_prefix, skip_lines, missing, column_names. Bad values stop
// with InputError naming the file, line and key.
TableSourceSpec table_source_from_section(const Config& config, const ConfigSection& section);

// Reads the table the spec names (read_fits_table, read_ecsv_table for a text file that
// starts with the ECSV signature, read_votable_table, else read_text_table).
SourceTable read_table_source(const TableSourceSpec& spec);

}  // namespace rungcal
