// SPDX-License-Identifier: MIT
#include "rungcal/ingest/ingest.hpp"

#include <algorithm>
#include <condition_variable>
#include <exception>
#include <filesystem>
#include <functional>
#include <future>
#include <map>
#include <memory>
#include <mutex>
#include <optional>
#include <string_view>
#include <thread>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"
#include "rungcal/core/id_registry.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/progress.hpp"
#include "rungcal/ingest/ingest_parts.hpp"
#include "rungcal/ingest/lightcurve_join.hpp"
#include "rungcal/table/catalog_schema.hpp"
#include "rungcal/table/ecsv_io.hpp"
#include "rungcal/table/fits_io.hpp"
#include "rungcal/table/votable_io.hpp"

namespace rungcal {
using namespace ingest_parts;

StarTable IngestResult::rejects_table() const {
  StarTable t;
  namespace R = reject_col;
  t.add_column(R::kSourceRow, ColumnType::kInteger, "", "line (text) or row (FITS) in the input");
  t.add_column(R::kId, ColumnType::kText);
  t.add_column(R::kRule, ColumnType::kText, "", "rule the row broke");
  t.add_column(R::kColumn, ColumnType::kText, "", "input column involved");
  t.add_column(R::kMessage, ColumnType::kText);
  for (const auto& r : rejected) {
    t.column(R::kSourceRow).push_integer(r.source_row);
    r.id.empty() ? t.column(R::kId).push_null() : t.column(R::kId).push_text(r.id);
    t.column(R::kRule).push_text(r.rule);
    r.column.empty() ? t.column(R::kColumn).push_null() : t.column(R::kColumn).push_text(r.column);
    t.column(R::kMessage).push_text(r.message);
  }
  return t;
}

namespace {

// The input's groups of rows, in file order: a FITS table or a text table, read a group
// at a time so that a large catalog never sits in memory whole.
class GroupReader {
 public:
  explicit GroupReader(const IngestOptions& o)
      : o_(o), chunk_(static_cast<std::size_t>(o.chunk_rows)) {
    if (o.input_is_fits)
      fits_ = std::make_unique<FitsTableReader>(o.input_path, o.hdu);
    else if (o.input_is_votable)
      ecsv_ = std::make_unique<SourceTable>(read_votable_table(o.input_path));  // read whole
    else if (looks_like_ecsv(o.input_path))
      ecsv_ = std::make_unique<SourceTable>(read_ecsv_table(o.input_path));  // read whole
    else
      text_ = std::make_unique<TextTableReader>(o.input_path, o.text);
  }
  // The next group; no rows at the end. progress_units: rows (FITS) or bytes (text) taken.
  SourceTable next(std::size_t& progress_units) {
    if (ecsv_) {
      const std::size_t rows = ecsv_->table.rows();
      const std::size_t end = std::min(rows, next_row_ + chunk_);
      progress_units = end - next_row_;
      if (next_row_ >= rows) return SourceTable{};
      std::vector<std::size_t> picked(end - next_row_);
      for (std::size_t i = 0; i < picked.size(); ++i) picked[i] = next_row_ + i;
      SourceTable g;
      g.file = ecsv_->file;
      g.row_label = ecsv_->row_label;
      g.unusable_columns = ecsv_->unusable_columns;
      g.table = ecsv_->table.select_rows(picked);
      g.source_rows.assign(ecsv_->source_rows.begin() + static_cast<std::ptrdiff_t>(next_row_),
                           ecsv_->source_rows.begin() + static_cast<std::ptrdiff_t>(end));
      next_row_ = end;
      return g;
    }
    if (fits_) {
      const auto rows = static_cast<std::size_t>(fits_->rows());
      if (next_row_ >= rows) {
        progress_units = 0;
        return SourceTable{};
      }
      SourceTable g = fits_->read(static_cast<std::int64_t>(next_row_), o_.chunk_rows);
      next_row_ += g.table.rows();
      progress_units = g.table.rows();
      return g;
    }
    const std::uint64_t before = text_->bytes_read();
    SourceTable g = text_->read(chunk_);
    progress_units = static_cast<std::size_t>(text_->bytes_read() - before);
    return g;
  }
  // All the progress units, and the rows to expect: a FITS table's own count, or a text
  // file's size over the bytes per line of the groups read so far.
  std::size_t progress_total() const {
    if (ecsv_) return ecsv_->table.rows();
    return fits_ ? static_cast<std::size_t>(fits_->rows())
                 : static_cast<std::size_t>(text_->file_bytes());
  }
  std::size_t expected_rows(std::size_t rows_so_far) const {
    if (ecsv_) return ecsv_->table.rows();
    if (fits_) return static_cast<std::size_t>(fits_->rows());
    const std::uint64_t read = text_->bytes_read(), all = text_->file_bytes();
    if (rows_so_far == 0 || read == 0 || read >= all) return rows_so_far;
    return static_cast<std::size_t>(static_cast<double>(rows_so_far) * static_cast<double>(all) /
                                    static_cast<double>(read) * 1.02) +
           1;
  }
  const char* row_label() const { return fits_ ? "row" : "line"; }  // ECSV: line
  const char* no_rows_message() const {
    return fits_ ? "the table has no rows" : "the table has no data rows";
  }

 private:
  const IngestOptions& o_;
  std::size_t chunk_;
  std::unique_ptr<FitsTableReader> fits_;
  std::unique_ptr<TextTableReader> text_;
  std::unique_ptr<SourceTable> ecsv_;  // an ECSV or VOTable table, read whole
  std::size_t next_row_ = 0;
};

// The offset of the first byte of s that breaks UTF-8 (RFC 3629: no overlong forms, no
// surrogates, nothing above U+10FFFF), or npos when s is well-formed.
std::size_t first_invalid_utf8(std::string_view s) {
  std::size_t i = 0;
  while (i < s.size()) {
    const auto b = static_cast<unsigned char>(s[i]);
    if (b < 0x80) {
      ++i;
      continue;
    }
    // Well-formed sequences by their first byte (RFC 3629, section 4): how many bytes follow
    // and the range of the second; the rest are 0x80..0xBF.
    struct Lead {
      unsigned first_lo, first_hi, follow, second_lo, second_hi;
    };
    static constexpr Lead kLeads[] = {{0xC2, 0xDF, 1, 0x80, 0xBF}, {0xE0, 0xE0, 2, 0xA0, 0xBF},
                                      {0xE1, 0xEC, 2, 0x80, 0xBF}, {0xED, 0xED, 2, 0x80, 0x9F},
                                      {0xEE, 0xEF, 2, 0x80, 0xBF}, {0xF0, 0xF0, 3, 0x90, 0xBF},
                                      {0xF1, 0xF3, 3, 0x80, 0xBF}, {0xF4, 0xF4, 3, 0x80, 0x8F}};
    const Lead* lead = nullptr;
    for (const Lead& l : kLeads)
      if (b >= l.first_lo && b <= l.first_hi) lead = &l;
    if (!lead) return i;
    const std::size_t n = lead->follow;
    const unsigned lo = lead->second_lo, hi = lead->second_hi;
    for (std::size_t k = 1; k <= n; ++k) {
      if (i + k >= s.size()) return i;
      const auto c = static_cast<unsigned char>(s[i + k]);
      if (c < (k == 1 ? lo : 0x80) || c > (k == 1 ? hi : 0xBF)) return i;
    }
    i += n + 1;
  }
  return std::string_view::npos;
}

// An id with the spaces around it cut and ASCII letters in lower case: two ids with the
// same folded form are most likely one star written twice.
std::string folded_id(std::string_view id) {
  const auto first = id.find_first_not_of(" \t");
  if (first == std::string_view::npos) return {};
  const auto last = id.find_last_not_of(" \t");
  std::string out(id.substr(first, last - first + 1));
  for (char& c : out)
    if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
  return out;
}

// Takes the settled groups' accepted rows, in file order, with the rows to expect in all.
using GroupSink = std::function<void(StarTable&&, std::size_t expected_rows)>;

// Reads, maps and checks the input group by group (FITS groups on every core, one cfitsio
// read at a time), settles each group's duplicate ids in file order and hands its accepted
// rows to sink in file order. Fills the rest of result; returns the catalog's columns and
// header without rows.
StarTable ingest_groups(const IngestOptions& given, IngestResult& result, const GroupSink& sink) {
  throw_if_invalid(given.check(), given.config_file);
  GroupReader input(given);
  std::size_t first_units = 0;
  SourceTable first_chunk = input.next(first_units);
  if (first_chunk.table.rows() == 0)
    throw InputError({given.input_path, {}, {}}, "empty_file", input.no_rows_message());
  // A preset's columns are known once the input's are; every group has the same columns.
  const IngestOptions o = with_preset_columns(given, first_chunk.table);
  std::size_t rows_read = first_chunk.table.rows();
  const std::size_t expected = input.expected_rows(rows_read);

  result.provenance = Provenance::for_stage("ingest");
  result.provenance.config_sha256 = o.config_sha256;
  // The input's hash for provenance, on its own thread while the rows are mapped.
  auto input_hash =
      std::async(std::launch::async, [path = o.input_path] { return sha256_file(path); });

  // The catalog's columns, made from the first group of rows (before any worker starts);
  // each group fills a copy.
  std::optional<CatalogLayout> layout;
  auto process = [&](const SourceTable& in) {
    if (!layout) {
      // The first group (chunk_rows rows) is the sample the unit checks look at.
      const GroupMapping mapping = resolve_group(o, in);
      apply_unit_checks(unit_sample(o, mapping, in), o.unit_checks);
      layout = make_catalog_layout(o, mapping);
    }
    return check_group(o, in, *layout);
  };
  IdRegistry ids(expected);
  IdRegistry folded_ids(expected);  // ids folded (folded_id): variants of one id
  std::size_t kept = 0;
  // Drawn on a terminal only: a nightly run under cron stays quiet.
  Progress progress("ingest " + std::filesystem::path(o.input_path).filename().string(),
                    input.progress_total());
  auto settle = [&](RowGroup&& g) {
    std::vector<std::size_t> keep;
    keep.reserve(g.rows.rows());
    bool dropped = false;
    const auto& accepted_ids = g.rows.column(layout->id).text;
    // How far ahead the registry's slots are loaded: about one memory latency of look-ups.
    constexpr std::size_t kPrefetchAhead = 16;
    const std::size_t count = g.fate.size();
    for (std::size_t r = 0; r < count; ++r) {
      if (r + kPrefetchAhead < count) ids.prefetch(g.id_hash[r + kPrefetchAhead]);
      const std::int64_t f = g.fate[r];
      const std::string& id = f >= 0 ? accepted_ids[static_cast<std::size_t>(f)]
                                     : g.refusals[static_cast<std::size_t>(-1 - f)].id;
      if (!id.empty()) {
        // Ids go to JSON and FITS text: a byte that is not UTF-8 stops the file here (it
        // was an internal error later, in the fit, issue 15).
        if (const std::size_t bad = first_invalid_utf8(id); bad != std::string_view::npos)
          throw InputError({o.input_path, g.source_rows[r], g.id_column, g.row_label},
                           "invalid_utf8",
                           fmt::format("the star id is not valid UTF-8: byte {} is 0x{:02X}",
                                       bad + 1, static_cast<unsigned char>(id[bad])));
        if (auto first = ids.first_seen(g.id_hash[r], g.source_rows[r])) {
          result.rejected.push_back(
              {g.source_rows[r], id, "duplicate_id", g.id_column,
               fmt::format("id '{}' was already used at {} {}", id, g.row_label, *first)});
          dropped = dropped || f >= 0;
          continue;
        }
        if (auto first = folded_ids.first_seen(IdRegistry::hash(folded_id(id)), g.source_rows[r])) {
          const std::string message =
              fmt::format("id '{}' equals the id at {} {} but for letter case or spaces around it",
                          id, g.row_label, *first);
          if (o.id_variants == IdVariantPolicy::kRefuse) {
            result.rejected.push_back({g.source_rows[r], id, "id_variant", g.id_column, message});
            dropped = dropped || f >= 0;
            continue;
          }
          spdlog::warn("{}: {} {}: {} (refused with [validate] id_variants = \"refuse\")",
                       o.input_path, g.row_label, g.source_rows[r], message);
        }
      }
      if (f >= 0) {
        keep.push_back(static_cast<std::size_t>(f));
      } else {
        RowRefusal& refusal = g.refusals[static_cast<std::size_t>(-1 - f)];
        result.rejected.push_back({refusal.source_row, std::move(refusal.id),
                                   std::move(refusal.reject.rule), std::move(refusal.reject.column),
                                   std::move(refusal.reject.message)});
      }
    }
    for (const RowRefusal& w : g.warnings)
      spdlog::warn("{}: {} {}: star '{}': [{}] {}", o.input_path, g.row_label, w.source_row, w.id,
                   w.reject.rule, w.reject.message);
    if (dropped) g.rows = g.rows.select_rows(keep);
    kept += g.rows.rows();
    sink(std::move(g.rows), expected);
    progress.advance(g.progress_units);
  };
  {
    RowGroup first = process(first_chunk);
    first.progress_units = first_units;
    first_chunk = SourceTable{};
    settle(std::move(first));
  }
  // Workers read groups in file order (one read at a time) and check them; this thread
  // settles them in that order and hands them on (writing, when streaming) meanwhile.
  std::mutex read_mutex, mutex;
  std::condition_variable changed;
  std::map<std::size_t, RowGroup> done;  // checked groups waiting to be settled
  std::size_t next = 1;                  // the next group to settle
  std::size_t next_read = 1;             // the group the next read makes
  std::optional<std::size_t> groups;     // known once a read finds the end
  bool failed = false;
  std::exception_ptr worker_error;
  const int threads = worker_threads(0);
  // Groups read past the next to settle, at most: memory stays a few groups.
  const auto ahead = static_cast<std::size_t>(threads) + 1;
  auto work = [&] {
    try {
      while (true) {
        {
          std::unique_lock lock(mutex);
          changed.wait(lock, [&] { return failed || groups || next_read < next + ahead; });
          if (failed || groups) return;
        }
        SourceTable in;
        std::size_t g = 0, units = 0;
        {
          std::lock_guard lock(read_mutex);
          {
            std::lock_guard state(mutex);
            if (groups) return;
          }
          in = input.next(units);
          std::lock_guard state(mutex);
          if (in.table.rows() == 0) {
            groups = next_read;
            changed.notify_all();
            return;
          }
          g = next_read++;
        }
        RowGroup rows = process(in);
        rows.progress_units = units;
        std::lock_guard lock(mutex);
        rows_read += in.table.rows();
        done.emplace(g, std::move(rows));
        changed.notify_all();
      }
    } catch (...) {
      std::lock_guard lock(mutex);
      if (!worker_error) worker_error = std::current_exception();
      failed = true;
      changed.notify_all();
    }
  };
  std::vector<std::thread> workers;
  for (int t = 0; t < threads; ++t) workers.emplace_back(work);
  auto join_workers = [&] {
    for (auto& w : workers) w.join();
  };
  try {
    while (true) {
      RowGroup rows;
      {
        std::unique_lock lock(mutex);
        changed.wait(lock,
                     [&] { return failed || (groups && next >= *groups) || done.count(next); });
        if (failed || (groups && next >= *groups && !done.count(next))) break;
        auto it = done.find(next);
        rows = std::move(it->second);
        done.erase(it);
      }
      settle(std::move(rows));
      std::lock_guard lock(mutex);
      ++next;
      changed.notify_all();
    }
  } catch (...) {
    {
      std::lock_guard lock(mutex);
      failed = true;
      changed.notify_all();
    }
    join_workers();
    throw;
  }
  join_workers();
  if (worker_error) std::rethrow_exception(worker_error);
  progress.finish();
  result.rows_read = rows_read;
  result.provenance.inputs.push_back(
      {o.input_path, input_hash.get(), static_cast<std::int64_t>(rows_read)});
  result.stars = kept;
  if (kept == 0) {
    std::string first = result.rejected.empty()
                            ? ""
                            : fmt::format(" (first: {} {}: [{}] {})", input.row_label(),
                                          result.rejected[0].source_row, result.rejected[0].rule,
                                          result.rejected[0].message);
    throw InputError({o.input_path, {}, {}}, "no_rows_left",
                     fmt::format("all {} rows were rejected{}", rows_read, first));
  }
  return layout->schema;
}

}  // namespace

IngestResult run_ingest(const IngestOptions& o) {
  IngestResult result;
  StarTable& cat = result.catalog;
  bool first = true;
  StarTable schema = ingest_groups(o, result, [&](StarTable&& rows, std::size_t) {
    if (first) {
      cat = std::move(rows);
      first = false;
    } else {
      cat.append_rows(rows);
    }
  });
  if (first) cat = std::move(schema);
  if (!o.lightcurves.summary_path.empty()) {
    join_lightcurve_summary(cat, o.lightcurves, result);
    refuse_incomplete_stars_after_join(cat, o, result);
    if (cat.rows() == 0 && !result.rejected.empty()) {
      const RejectedRow& refused = result.rejected.front();
      throw InputError({o.input_path, {}, {}}, "no_rows_left",
                       fmt::format("all {} rows were rejected by the end of the light-curve join; "
                                   "the first, star '{}' (row {}): [{}] {}",
                                   result.rows_read, refused.id, refused.source_row, refused.rule,
                                   refused.message));
    }
  }
  stamp_provenance(cat, result.provenance, "catalog");
  return result;
}

IngestResult ingest_catalog_file(const IngestOptions& o) {
  if (!o.lightcurves.summary_path.empty()) {
    // A light-curve join needs the whole catalog.
    IngestResult result = run_ingest(o);
    write_ingest_products(result, o);
    return result;
  }
  IngestResult result;
  // Made at the first accepted row: a file that fails its first checks leaves nothing.
  std::optional<FitsTableStream> stream;
  StarTable schema = ingest_groups(o, result, [&](StarTable&& rows, std::size_t expected) {
    if (rows.rows() == 0) return;
    // Made with a row for every input row expected: rows not used are dropped at the end,
    // and the table grows past them if a text file's estimate fell short.
    if (!stream)
      stream.emplace(o.catalog_path, catalog_hdu::kCatalog, static_cast<std::int64_t>(expected));
    stream->append(rows);
  });
  stamp_provenance(schema, result.provenance, "catalog");
  StarTable rejects = result.rejects_table();
  stamp_provenance(rejects, result.provenance, "rejects");
  stream->finish(schema.header(), {{catalog_hdu::kRejects, &rejects}}, schema);
  write_csv_table(rejects, ingest_rejects_csv_path(o));
  result.catalog = std::move(schema);  // columns and header: the rows are in the file
  return result;
}

void write_ingest_products(const IngestResult& result, const IngestOptions& o) {
  StarTable rejects = result.rejects_table();
  stamp_provenance(rejects, result.provenance, "rejects");
  write_fits_tables(o.catalog_path,
                    {{catalog_hdu::kCatalog, &result.catalog}, {catalog_hdu::kRejects, &rejects}});
  write_csv_table(rejects, ingest_rejects_csv_path(o));
}

}  // namespace rungcal
