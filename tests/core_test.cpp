// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/core: errors, provenance hashes, atomic writes, config reading.
#include <fcntl.h>
#include <gtest/gtest.h>
#include <spdlog/spdlog.h>
#include <sys/file.h>
#include <sys/stat.h>
#include <sys/sysmacros.h>
#include <unistd.h>

#include <algorithm>
#include <bit>
#include <chrono>
#include <cmath>
#include <cstdlib>
#include <set>

#include <filesystem>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/config.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/file_lock.hpp"
#include "rungcal/core/log.hpp"
#include "rungcal/core/parallel.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/simd.hpp"
#include "rungcal/core/stage_main.hpp"
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
  EXPECT_STREQ(e.what(),
               "cat.csv:line 12: column 'parallax': [not_a_number] 'abc' is not a number");
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

// Permission bits of a path (not followed).
unsigned mode_of(const std::string& path) {
  struct stat st {};
  ::lstat(path.c_str(), &st);
  return st.st_mode & 07777;
}

// Sets the umask for one scope.
struct UmaskScope {
  explicit UmaskScope(mode_t m) : old(::umask(m)) {}
  ~UmaskScope() { ::umask(old); }
  mode_t old;
};

std::string input_rule(const std::string& path, std::string* message = nullptr) {
  try {
    check_input_file(path);
  } catch (const InputError& e) {
    if (message) *message = e.detail();
    return e.rule();
  }
  return "";
}

TEST(FileSafety, TemporaryNamesAreUnpredictableExclusiveAndFollowTheUmask) {
  // Issue 15: a planted ".NAME.PID-N.part" symlink made root write through it. Temporary
  // names now carry 12 random letters and digits (62^12 names) and are created with
  // O_EXCL | O_NOFOLLOW; the mode is 0666 less the umask, as for any new file (open(2)).
  test::TempDir dir;
  std::set<std::string> names;
  for (int i = 0; i < 50; ++i) {
    AtomicOutput out(dir.file("x.txt"));
    const std::string name = std::filesystem::path(out.temp_path()).filename().string();
    EXPECT_TRUE(is_temporary_name(name)) << name;
    EXPECT_EQ(name.rfind(".x.txt.rgtmp-", 0), 0u) << name;
    EXPECT_EQ(name.size(), std::string(".x.txt.rgtmp-").size() + 12 + 5);
    names.insert(name);
  }
  EXPECT_EQ(names.size(), 50u);
  for (mode_t mask : {022u, 002u, 077u}) {
    UmaskScope scope(mask);
    write_file_atomically(dir.file("x.txt"), "content");
    EXPECT_EQ(mode_of(dir.file("x.txt")), 0666u & ~mask) << std::oct << mask;
  }
  // Names of the project's temporary files, and names that are not.
  EXPECT_TRUE(is_temporary_name(".catalog_rejects.csv.1234-5.part"));  // older releases
  EXPECT_FALSE(is_temporary_name("catalog.fits.rgtmp-abcdefABCDEF.part"));
  EXPECT_FALSE(is_temporary_name(".catalog.fits.rgtmp-abcdef.part"));
  EXPECT_FALSE(is_temporary_name(".notes.part"));
  EXPECT_FALSE(is_temporary_name(".a.b-c.part"));
}

TEST(FileSafety, OutputsThatAreNotRegularFilesAreRefusedAndKept) {
  // Issue 15: --out naming a device replaced the device with a regular file. A FIFO, a
  // folder and (when this process may make one) a character device are refused with rule
  // output_not_regular_file, and stay what they were.
  test::TempDir dir;
  ASSERT_EQ(::mkfifo(dir.file("fifo").c_str(), 0666), 0);
  std::filesystem::create_directory(dir.file("folder"));
  std::vector<std::string> targets = {dir.file("fifo"), dir.file("folder")};
  if (::mknod(dir.file("null").c_str(), S_IFCHR | 0666, makedev(1, 3)) == 0)
    targets.push_back(dir.file("null"));
  for (const std::string& target : targets) {
    const unsigned type = std::filesystem::is_directory(target) ? S_IFDIR : 0;
    try {
      write_file_atomically(target, "data");
      ADD_FAILURE() << target << " was written";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "output_not_regular_file") << target;
    }
    struct stat st {};
    ASSERT_EQ(::lstat(target.c_str(), &st), 0);
    EXPECT_FALSE(S_ISREG(st.st_mode)) << target;
    if (type) {
      EXPECT_TRUE(S_ISDIR(st.st_mode));
    }
  }
  // A symlink to a regular file is an output like any other: the link is replaced by the
  // new file, and the file it pointed to is untouched.
  test::write_text(dir.file("target.txt"), "keep");
  std::filesystem::create_symlink(dir.file("target.txt"), dir.file("link.txt"));
  write_file_atomically(dir.file("link.txt"), "new");
  EXPECT_EQ(test::read_text(dir.file("target.txt")), "keep");
  EXPECT_EQ(test::read_text(dir.file("link.txt")), "new");
  for (const auto& e : std::filesystem::directory_iterator(dir.path()))
    EXPECT_FALSE(is_temporary_name(e.path().filename().string())) << e.path();
}

TEST(FileSafety, InputsMustBeRegularFilesAndAFifoIsRefusedAtOnce) {
  // Issue 15: a FIFO as input or config blocked forever holding the run lock; a folder was
  // "no such file" (or read as an empty config); a symlink loop was an internal error.
  test::TempDir dir;
  ASSERT_EQ(::mkfifo(dir.file("fifo").c_str(), 0666), 0);
  std::filesystem::create_directory(dir.file("folder"));
  std::filesystem::create_symlink(dir.file("loop_b"), dir.file("loop_a"));
  std::filesystem::create_symlink(dir.file("loop_a"), dir.file("loop_b"));
  test::write_text(dir.file("ok.toml"), "a = 1\n");
  std::string message;
  const auto start = std::chrono::steady_clock::now();
  EXPECT_EQ(input_rule(dir.file("fifo"), &message), "input_not_regular_file");
  EXPECT_NE(message.find("a FIFO"), std::string::npos) << message;
  EXPECT_EQ(input_rule(dir.file("folder"), &message), "input_not_regular_file");
  EXPECT_NE(message.find("a folder"), std::string::npos) << message;
  EXPECT_EQ(input_rule(dir.file("loop_a"), &message), "unreadable_file");
  EXPECT_NE(message.find("Too many levels of symbolic links"), std::string::npos)
      << message;  // ELOOP
  EXPECT_EQ(input_rule(dir.file("absent"), &message), "unreadable_file");
  EXPECT_EQ(message, "no such file");
  EXPECT_EQ(input_rule(dir.file("ok.toml")), "");
  for (const char* name : {"fifo", "folder"}) {
    try {
      Config::from_file(dir.file(name));
      ADD_FAILURE() << name << " was read as a config";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "input_not_regular_file");
    }
  }
  // Not waited on: the FIFO has no writer, so a blocking open would never return.
  EXPECT_LT(std::chrono::steady_clock::now() - start, std::chrono::seconds(60));
}

TEST(FileSafety, LockFilesFollowTheUmaskAndNeverASymlink) {
  // Issue 15: lock files were always 0644 (group members under umask 002 could not take
  // the lock) and followed symlinks; the error named no errno.
  test::TempDir dir;
  {
    UmaskScope scope(002);
    FileLock lock(dir.file("a.lock"), 1.0);
    EXPECT_EQ(mode_of(dir.file("a.lock")), 0664u);
  }
  test::write_text(dir.file("victim"), "keep");
  std::filesystem::create_symlink(dir.file("victim"), dir.file("b.lock"));
  std::filesystem::create_symlink(dir.file("absent"), dir.file("c.lock"));
  for (const char* name : {"b.lock", "c.lock"}) {
    try {
      FileLock lock(dir.file(name), 1.0);
      ADD_FAILURE() << name << ": a symlinked lock file was taken";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "write_failed");
      EXPECT_NE(std::string(e.what()).find("Too many levels of symbolic links"), std::string::npos)
          << e.what();
    }
  }
  EXPECT_FALSE(test::file_exists(dir.file("absent")));
  EXPECT_EQ(test::read_text(dir.file("victim")), "keep");
  // A folder where the lock file should be: refused with the system's reason.
  std::filesystem::create_directory(dir.file("d.lock"));
  EXPECT_THROW(FileLock(dir.file("d.lock"), 1.0), InputError);
}

TEST(FileSafety, TheLogFileNeverFollowsASymlinkFollowsTheUmaskAndRotates) {
  test::TempDir dir;
  test::write_text(dir.file("victim"), "keep");
  std::filesystem::create_symlink(dir.file("victim"), dir.file("run.log"));
  setup_logging("test", Verbosity::kQuiet, dir.file("run.log"));
  try {
    throw_deferred_logging_error();
    ADD_FAILURE() << "a symlinked log file was opened";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "write_failed");
    EXPECT_NE(std::string(e.what()).find("symlink"), std::string::npos) << e.what();
  }
  EXPECT_EQ(test::read_text(dir.file("victim")), "keep");
  {
    UmaskScope scope(002);
    setup_logging("test", Verbosity::kQuiet, dir.file("own.log"), 200, 2);
    throw_deferred_logging_error();  // nothing kept: the file opened
    for (int i = 0; i < 20; ++i) spdlog::info("message number {} of a rotating log", i);
  }
  // A log file's folder is made when missing, as spdlog's own file sinks made it.
  setup_logging("test", Verbosity::kQuiet, dir.file("logs/new/run.log"));
  throw_deferred_logging_error();
  spdlog::info("into a new folder");
  setup_logging("test", Verbosity::kQuiet);
  EXPECT_NE(test::read_text(dir.file("logs/new/run.log")).find("into a new folder"),
            std::string::npos);
  EXPECT_EQ(mode_of(dir.file("own.log")), 0664u);
  EXPECT_TRUE(test::file_exists(dir.file("own.log.1")));
  EXPECT_TRUE(test::file_exists(dir.file("own.log.2")));
  EXPECT_FALSE(test::file_exists(dir.file("own.log.3")));
  EXPECT_LE(std::filesystem::file_size(dir.file("own.log")), 200u);
  EXPECT_NE(test::read_text(dir.file("own.log")).find("message number 19"), std::string::npos);
}

TEST(FileSafety, StaleTemporariesOfKilledRunsAreRemovedAndNothingElse) {
  // Issue 15: ".part" files of killed runs stayed. The first output into a folder removes
  // this project's temporary files there that are regular, this user's, older than this
  // process and locked by no live writer; everything else stays.
  test::TempDir dir;
  const auto old = [&](const std::string& name) {
    test::write_text(dir.file(name), "left over");
    struct timespec times[2] = {{1000000000, 0}, {1000000000, 0}};  // 2001
    ::utimensat(AT_FDCWD, dir.file(name).c_str(), times, AT_SYMLINK_NOFOLLOW);
  };
  old(".catalog.fits.rgtmp-abcdefABCDEF.part");  // stale: removed
  old(".catalog_rejects.csv.4242-7.part");       // an older release's name: removed
  old(".catalog.fits.rgtmp-lockedLOCKED.part");  // a live writer's: kept
  old("notes.part");                             // not a temporary name: kept
  old(".catalog.fits.rgtmp-short.part");         // not the pattern: kept
  test::write_text(dir.file(".fresh.fits.rgtmp-abcdefABCDEF.part"),
                   "being written");  // newer than the process
  std::filesystem::create_symlink(dir.file("notes.part"),
                                  dir.file(".link.rgtmp-abcdefABCDEF.part"));
  const int locked = ::open(dir.file(".catalog.fits.rgtmp-lockedLOCKED.part").c_str(), O_RDONLY);
  ASSERT_GE(locked, 0);
  ASSERT_EQ(::flock(locked, LOCK_EX), 0);
  // The lock is held by another open file description, as another process's would be.
  write_file_atomically(dir.file("catalog.fits"), "new");
  ::close(locked);
  std::set<std::string> left;
  for (const auto& e : std::filesystem::directory_iterator(dir.path()))
    left.insert(e.path().filename().string());
  EXPECT_EQ(left, (std::set<std::string>{"catalog.fits", ".catalog.fits.rgtmp-lockedLOCKED.part",
                                         "notes.part", ".catalog.fits.rgtmp-short.part",
                                         ".fresh.fits.rgtmp-abcdefABCDEF.part",
                                         ".link.rgtmp-abcdefABCDEF.part"}));
}

TEST(FileSafety, ErrorsNameTheSystemsReason) {
  // A full disk is named as such, not as bad data (issue 15), and a permission error names
  // its errno text.
  EXPECT_NE(errno_text(ENOSPC).find("No space left on device"), std::string::npos);
  EXPECT_EQ(errno_text(EACCES), "Permission denied");
  if (::geteuid() == 0) GTEST_SKIP() << "root is not refused by permissions";
  test::TempDir dir;
  std::filesystem::create_directory(dir.file("ro"));
  ::chmod(dir.file("ro").c_str(), 0555);
  try {
    write_file_atomically(dir.file("ro/x.txt"), "data");
    ADD_FAILURE() << "written into a read-only folder";
  } catch (const InputError& e) {
    EXPECT_NE(std::string(e.what()).find("Permission denied"), std::string::npos) << e.what();
  }
  ::chmod(dir.file("ro").c_str(), 0755);
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

TEST(Config, TheHashIsOfTheParsedContentNotTheBytes) {
  // Issue 15: a comment-only edit published a new version. Keys sorted, comments and layout
  // dropped; a value or a type is a change.
  const Config a = Config::from_string("# fit\n[fit]\nb = 2.0\na = \"x\"\n");
  const Config b = Config::from_string("[fit]   # the fit\na=\"x\"\n\nb = 2.00   # two\n");
  const Config c = Config::from_string("[fit]\na = \"x\"\nb = 2.5\n");
  const Config d = Config::from_string("[fit]\na = \"x\"\nb = 2\n");
  EXPECT_EQ(a.sha256(), b.sha256());
  EXPECT_NE(a.sha256(), c.sha256());
  EXPECT_NE(a.sha256(), d.sha256());  // 2 is an integer, 2.0 a float
  EXPECT_EQ(canonical_config_text("x = 1 # one\n"), canonical_config_text("x=1"));
  EXPECT_EQ(canonical_config_text("not = = toml"), "not = = toml");
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

TEST(StageMain, CommandLineSettingsRecordEveryOptionButTheLeftOut) {
  CLI::App app;
  int mocks = 100;
  double width = 1.0;
  bool fixed = false, other = false;
  std::string out;
  app.add_option("--mocks", mocks)->capture_default_str();
  app.add_option("--width", width)->capture_default_str();
  app.add_flag("--fixed", fixed);
  app.add_flag("--other", other);
  app.add_option("--out", out);
  std::vector<std::string> args = {"prog", "--mocks", "7", "--fixed", "--out", "x.json"};
  std::vector<char*> argv;
  for (auto& a : args) argv.push_back(a.data());
  app.parse(static_cast<int>(argv.size()), argv.data());
  const nlohmann::json s = command_line_settings(app, {"out"});
  EXPECT_EQ(s, (nlohmann::json{{"mocks", "7"}, {"width", "1"}, {"fixed", true}, {"other", false}}));
}

}  // namespace
}  // namespace rungcal
