// SPDX-License-Identifier: MIT
// Large-catalog benchmark (run by bench/compare_ingest.py, never by the tests):
//   bench_ingest make FILE ROWS       writes a simulated calibrator catalog (invented stars)
//   bench_ingest raw FILE             reads every column with plain cfitsio, in bulk
//   bench_ingest ingest FILE CONFIG   rungcal-ingest's path: groups of rows read, mapped,
//                                     checked and written to the output catalog
//   bench_ingest memory FILE CONFIG   the same without writing: the whole catalog in memory
// Each prints "seconds S", "peak_rss_mb M" and "bytes B" (the table's data size).
#include <fitsio.h>
#include <sys/resource.h>

#include <chrono>
#include <cstdio>
#include <string>
#include <vector>

#include <fmt/format.h>

#include "rungcal/core/log.hpp"
#include "rungcal/core/random.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/table/fits_io.hpp"

namespace {

double peak_rss_mb() {
  rusage u{};
  getrusage(RUSAGE_SELF, &u);
  return static_cast<double>(u.ru_maxrss) / 1024.0;
}

const char* kRealColumns[] = {"PERIOD", "PLX",    "PLX_ERR", "RUWE",   "EBV",  "EBV_ERR",
                              "FEH",    "V_MEAN", "V_ERR",   "I_MEAN", "I_ERR"};

int make(const std::string& path, long rows) {
  rungcal::Random rng(7);
  rungcal::StarTable t;
  t.add_column("STAR", rungcal::ColumnType::kText);
  t.add_column("MODE", rungcal::ColumnType::kText);
  for (const char* c : kRealColumns) t.add_column(c, rungcal::ColumnType::kReal);
  t.column("PERIOD").unit = "d";
  t.column("PLX").unit = "mas";
  t.column("PLX_ERR").unit = "mas";
  for (long i = 0; i < rows; ++i) {
    t.column("STAR").push_text(fmt::format("SIM-{:07d}", i));
    t.column("MODE").push_text(rng.uniform() < 0.85 ? "F" : "1O");
    const double logp = rng.uniform(0.3, 1.7), d = rng.uniform(0.5, 8.0);
    t.column("PERIOD").push_real(std::pow(10.0, logp));
    t.column("PLX").push_real(1.0 / d + rng.normal(0, 0.03));
    t.column("PLX_ERR").push_real(0.03);
    t.column("RUWE").push_real(rng.uniform(0.8, 1.3));
    t.column("EBV").push_real(rng.uniform(0.05, 1.2));
    t.column("EBV_ERR").push_real(0.05);
    t.column("FEH").push_real(rng.normal(0, 0.15));
    const double mu = 5 * std::log10(d * 100);
    t.column("V_MEAN").push_real(-4.0 - 2.5 * (logp - 1) + mu + 3.1 * 0.5);
    t.column("V_ERR").push_real(0.02);
    t.column("I_MEAN").push_real(-4.8 - 2.9 * (logp - 1) + mu + 1.8 * 0.5);
    t.column("I_ERR").push_real(0.02);
  }
  rungcal::write_fits_tables(path, {{"STARS", &t}});
  std::printf("rows %ld\n", rows);
  return 0;
}

int raw(const std::string& path) {
  const auto t0 = std::chrono::steady_clock::now();
  fitsfile* f = nullptr;
  int status = 0, hdutype = 0, ncols = 0;
  LONGLONG nrows = 0;
  fits_open_file(&f, path.c_str(), READONLY, &status);
  fits_movabs_hdu(f, 2, &hdutype, &status);
  fits_get_num_rowsll(f, &nrows, &status);
  fits_get_num_cols(f, &ncols, &status);
  const auto n = static_cast<std::size_t>(nrows);
  std::size_t bytes = 0;
  for (int c = 1; c <= ncols; ++c) {
    int typecode = 0;
    LONGLONG repeat = 0, width = 0;
    fits_get_eqcoltypell(f, c, &typecode, &repeat, &width, &status);
    if (typecode == TSTRING) {
      std::vector<char> buf(n * static_cast<std::size_t>(width + 1));
      std::vector<char*> ptr(n);
      for (std::size_t r = 0; r < n; ++r)
        ptr[r] = buf.data() + r * static_cast<std::size_t>(width + 1);
      int anynul = 0;
      fits_read_col_str(f, c, 1, 1, nrows, const_cast<char*>(""), ptr.data(), &anynul, &status);
      bytes += n * static_cast<std::size_t>(width);
    } else {
      std::vector<double> v(n);
      int anynul = 0;
      fits_read_col_dbl(f, c, 1, 1, nrows, 0.0, v.data(), &anynul, &status);
      bytes += n * 8;
    }
  }
  fits_close_file(f, &status);
  const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  if (status) {
    std::fprintf(stderr, "cfitsio status %d\n", status);
    return 1;
  }
  std::printf("seconds %.4f\npeak_rss_mb %.1f\nbytes %zu\n", s, peak_rss_mb(), bytes);
  return 0;
}

int ingest(const std::string& path, const std::string& config, bool to_file) {
  const auto t0 = std::chrono::steady_clock::now();
  rungcal::IngestOptions o = rungcal::ingest_options_from_file(config);
  o.input_path = path;
  o.catalog_path = path + ".catalog.fits";
  o.rejects_csv_path = path + ".rejects.csv";
  rungcal::IngestResult r = to_file ? rungcal::ingest_catalog_file(o) : rungcal::run_ingest(o);
  const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  std::printf("seconds %.4f\npeak_rss_mb %.1f\nrows %zu\nrejected %zu\n", s, peak_rss_mb(), r.stars,
              r.rejected.size());
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  const std::string mode = argc > 1 ? argv[1] : "";
  rungcal::keep_freed_memory_for_reuse();  // as rungcal-ingest does
  if (mode == "make" && argc == 4) return make(argv[2], std::stol(argv[3]));
  if (mode == "raw" && argc == 3) return raw(argv[2]);
  if (mode == "ingest" && argc == 4) return ingest(argv[2], argv[3], true);
  if (mode == "memory" && argc == 4) return ingest(argv[2], argv[3], false);
  std::fprintf(stderr,
               "usage: bench_ingest make FILE ROWS | raw FILE | ingest|memory FILE CONFIG\n");
  return 2;
}
