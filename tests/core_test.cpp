// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/core: errors, provenance hashes, atomic writes, config reading.
#include <gtest/gtest.h>

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstdlib>

#include <filesystem>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/simd.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

TEST(ByteBuffer, ValuesComeBackBitForBitNanPayloadsIncluded) {
  const double payload_nan = std::bit_cast<double>(0x7ff8000000000123ull);
  Eigen::MatrixXd m(2, 3);
  m << 1, 2, 3, 4, payload_nan, -0.0;
  ByteWriter w;
  w.put(payload_nan);
  w.put_string(std::string("a\0b", 3));
  w.put_strings({"", "V", "Ks"});
  w.put_vector(std::vector<int>{7, -1});
  w.put_matrix(m);
  const std::string bytes = w.release();
  ByteReader r(bytes);
  EXPECT_EQ(std::bit_cast<std::uint64_t>(r.get<double>()), 0x7ff8000000000123ull);
  EXPECT_EQ(r.get_string(), std::string("a\0b", 3));
  EXPECT_EQ(r.get_strings(), (std::vector<std::string>{"", "V", "Ks"}));
  EXPECT_EQ(r.get_vector<int>(), (std::vector<int>{7, -1}));
  const Eigen::MatrixXd back = r.get_matrix();
  ASSERT_EQ(back.rows(), 2);
  EXPECT_EQ(std::bit_cast<std::uint64_t>(back(1, 1)), 0x7ff8000000000123ull);
  EXPECT_TRUE(std::signbit(back(1, 2)));
  EXPECT_TRUE(r.at_end());
  EXPECT_THROW(r.get<char>(), std::logic_error);
}

TEST(Cluster, OneProcessRunsEveryIndexAndDecodesNothing) {
  // Outside an MPI launch (as in this test) the world is one process.
  ASSERT_EQ(Cluster::world().size(), 1);
  EXPECT_TRUE(Cluster::world().writes_outputs());
  std::vector<int> done(37, 0);
  int decoded = 0;
  distributed_for(
      done.size(), 2, [&](std::size_t i) { done[i] += 1; },
      [&](std::size_t) { return std::string("x"); },
      [&](std::size_t, const std::string&) { ++decoded; });
  EXPECT_EQ(std::count(done.begin(), done.end(), 1), 37);
  EXPECT_EQ(decoded, 0);
  {
    LocalWorkScope local;
    EXPECT_EQ(Cluster::world().size(), 1);
  }
}

TEST(Cluster, ABodysInputErrorReachesTheCallerWithItsRule) {
  try {
    distributed_for(
        5, 1,
        [](std::size_t i) {
          if (i == 3) throw InputError({"x.csv", 4, "mag"}, "not_a_number", "bad");
        },
        [](std::size_t) { return std::string(); }, [](std::size_t, const std::string&) {});
    FAIL() << "no exception";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "not_a_number");
  }
}

TEST(Parallel, RanksOnOneMachineShareItsCores) {
  const int all = worker_threads(0);
  ::setenv("OMPI_COMM_WORLD_LOCAL_SIZE", "2", 1);
  EXPECT_EQ(worker_threads(0), std::max(1, all / 2));
  EXPECT_EQ(worker_threads(3), 3);  // an explicit count is kept
  ::unsetenv("OMPI_COMM_WORLD_LOCAL_SIZE");
  EXPECT_EQ(worker_threads(0), all);
}

TEST(Error, MessageNamesFileRowColumnAndRule) {
  InputError e({"cat.csv", 12, "parallax", "line"}, "not_a_number", "'abc' is not a number");
  EXPECT_STREQ(e.what(), "cat.csv:line 12: column 'parallax': [not_a_number] 'abc' is not a number");
  EXPECT_EQ(e.rule(), "not_a_number");
}

TEST(Error, ExitCodesAreTheDocumentedValues) {
  // docs/exit-codes.md: scripts rely on these numbers.
  EXPECT_EQ(static_cast<int>(ExitCode::kSuccess), 0);
  EXPECT_EQ(static_cast<int>(ExitCode::kInternalError), 1);
  EXPECT_EQ(static_cast<int>(ExitCode::kBadInput), 2);
  EXPECT_EQ(static_cast<int>(ExitCode::kNothingToDo), 3);
  EXPECT_EQ(static_cast<int>(ExitCode::kDriftAlarm), 4);
  EXPECT_EQ(static_cast<int>(ExitCode::kBusy), 5);
  EXPECT_STREQ(exit_code_name(ExitCode::kBadInput), "bad_input");
}

TEST(Provenance, Sha256MatchesFips180TestVectors) {
  // FIPS 180-4 / NIST CSRC example values for SHA-256.
  EXPECT_EQ(sha256_hex("abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
  EXPECT_EQ(sha256_hex(""), "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
}

TEST(Provenance, FileHashEqualsStringHash) {
  test::TempDir dir;
  test::write_text(dir.file("a.txt"), "abc");
  EXPECT_EQ(sha256_file(dir.file("a.txt")), sha256_hex("abc"));
  EXPECT_THROW(sha256_file(dir.file("missing.txt")), InputError);
}

TEST(Provenance, UtcTimeIsIso8601) {
  std::string t = utc_now_iso8601();
  ASSERT_EQ(t.size(), 20u);
  EXPECT_EQ(t[4], '-');
  EXPECT_EQ(t[10], 'T');
  EXPECT_EQ(t.back(), 'Z');
}

TEST(AtomicOutput, CommitReplacesAndLeavesNoTemporaryFile) {
  test::TempDir dir;
  write_file_atomically(dir.file("x.txt"), "old");
  write_file_atomically(dir.file("x.txt"), "new");
  EXPECT_EQ(test::read_text(dir.file("x.txt")), "new");
  int files = 0;
  for (const auto& e : std::filesystem::directory_iterator(dir.path())) (void)e, ++files;
  EXPECT_EQ(files, 1);
}

TEST(AtomicOutput, AbandonedOutputRemovesItsTemporaryFileAndKeepsTheOld) {
  test::TempDir dir;
  write_file_atomically(dir.file("x.txt"), "old");
  std::string temp;
  {
    AtomicOutput out(dir.file("x.txt"));
    temp = out.temp_path();
    test::write_text(temp, "half");
  }
  EXPECT_FALSE(test::file_exists(temp));
  EXPECT_EQ(test::read_text(dir.file("x.txt")), "old");
}

TEST(AtomicOutput, EarlyWritebackChangesNothingButTiming) {
  // Writeback started while the file grows, and again after more is written, then the
  // output abandoned once and committed once: the content and the all-or-nothing rule hold.
  test::TempDir dir;
  write_file_atomically(dir.file("x.txt"), "old");
  for (bool commit : {false, true}) {
    AtomicOutput out(dir.file("x.txt"));
    test::write_text(out.temp_path(), "first part ");
    out.start_writeback();
    test::write_text(out.temp_path(), "first part and the rest");
    out.start_writeback();
    if (commit) out.commit();
  }
  EXPECT_EQ(test::read_text(dir.file("x.txt")), "first part and the rest");
  int files = 0;
  for (const auto& e : std::filesystem::directory_iterator(dir.path())) (void)e, ++files;
  EXPECT_EQ(files, 1);
}

TEST(Config, UnknownKeyIsNamedWithItsLine) {
  Config c = Config::from_string("[source]\npath = \"a\"\ndelimter = \"comma\"\n", "x.toml");
  auto src = c.root().section("source");
  ASSERT_TRUE(src);
  EXPECT_EQ(src->require_string("path"), "a");
  try {
    c.check_unknown_keys();
    FAIL() << "expected an error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "unknown_config_key");
    EXPECT_EQ(e.where().column, "source.delimter");
    EXPECT_EQ(e.where().row, 3);
  }
}

TEST(Config, TypeErrorsNameTheKey) {
  Config c = Config::from_string("n = \"three\"\n", "x.toml");
  try {
    (void)c.root().get_number("n");
    FAIL() << "expected an error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "config_value");
    EXPECT_NE(std::string(e.what()).find("must be a number"), std::string::npos);
  }
}

TEST(Config, SyntaxErrorNamesTheLine) {
  try {
    Config::from_string("a = 1\nb = [1, \n", "bad.toml");
    FAIL() << "expected an error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "config_syntax");
    EXPECT_TRUE(e.where().row.has_value());
  }
}

TEST(Config, RelativePathsResolveAgainstTheConfigFolder) {
  Config c = Config::from_string("", "/data/cfg/run.toml");
  EXPECT_EQ(c.resolve_path("in/cat.csv"), "/data/cfg/in/cat.csv");
  EXPECT_EQ(c.resolve_path("/abs/cat.csv"), "/abs/cat.csv");
}

TEST(Cluster, AnItemThatFailsStopsTheStageWithItsRuleAndWritesNothing) {
  // RUNGCAL_FAULT_THROW makes one light curve (item 7) fail as bad input would; the
  // two-rank version, where the item is rank 1's, is in tests/mpi_test.sh.
  test::TempDir dir;
  auto r = test::run_command("RUNGCAL_FAULT_THROW=distributed_item:7 " +
                             std::string(RUNGCAL_BIN_DIR) + "/rungcal-lightcurve -q --config " +
                             test::source_file("config/demo/lightcurve.toml") + " --out " +
                             dir.file("lc.fits") + " 2>&1");
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[injected_fault]"), std::string::npos) << r.output;
  EXPECT_FALSE(test::file_exists(dir.file("lc.fits")));
}

TEST(Simd, VectorisableExpAgreesWithTheLibraryToAFewUlp) {
  // Reference: std::exp (glibc, correctly rounded to < 1 ulp) over the range the fit uses
  // (photometric parallaxes: |x| up to ~40) and beyond.
  double worst = 0;
  for (int i = -70000; i <= 70000; ++i) {
    const double x = i * 0.01 + 0.000123;
    worst = std::max(worst, std::abs(exp_vectorisable(x) / std::exp(x) - 1.0));
  }
  EXPECT_LT(worst, 4e-16);
  EXPECT_EQ(exp_vectorisable(0.0), 1.0);
}

}  // namespace
}  // namespace rungcal
