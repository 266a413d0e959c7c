// SPDX-License-Identifier: MIT
// Bad input across the stage executables (deredden, fit, publish, apply, report, diff,
// simulate, run, lightcurve, and ingest's file cases): each case must stop with exit 2, a
// message naming the file and the broken rule in brackets, and leave nothing half-written.
// The ingest stage's row and config cases are in ingest_test.cpp, the light-curve stage's
// in lightcurve_test.cpp. Valid input that once failed (issue 15) is at the end.
#include <gtest/gtest.h>

#include <algorithm>
#include <filesystem>
#include <ostream>
#include <string>
#include <vector>

#include "test_util.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

struct StageCase {
  const char* name;
  std::string stage;
  std::string args;                                        // {dir} stands for the case's folder
  std::vector<std::pair<std::string, std::string>> files;  // written into {dir} first
  std::string rule;                                        // expected [rule]
  std::string names;                                       // the message names this (file or key)
  std::string must_not_exist = "out";                      // nothing written here
  std::string setup = "";  // shell commands run in {dir} after the files are written
};

// Test names in listings, not the struct's bytes.
void PrintTo(const StageCase& c, std::ostream* os) { *os << c.name; }

const std::string kDemo = test::source_file("config/demo");
const std::string kRelation = "[[relation]]\nname = \"V\"\nband = \"V\"\n";
const std::string kTargets = "--config " + test::source_file("config/demo/ingest_targets.toml");
const std::string kTargetsHeader =
    "id,host,period_d,ebv,ebv_err,feh,mag_V,mag_err_V,mag_I,mag_err_I,mag_H,mag_err_H\n";
const std::string kTargetsLine =
    "VEY-0001,Veyra Spiral,29.93505,0.121,0.02,-0.1,24.393,0.082,23.519,0.067,22.176,0.078\n";
// A pipeline config over the demo's stage configs, into {dir}/out.
const std::string kPipeline =
    "[run]\nfolder = \"out\"\ncalibration = \"c\"\n[ingest]\nconfig = \"" + kDemo +
    "/ingest.toml\"\n[deredden]\nconfig = \"" + kDemo + "/deredden.toml\"\n[fit]\nconfig = \"" +
    kDemo + "/fit.toml\"\n";
// A small ingest config (the input is never reached: the config is refused first).
const std::string kIngestConfig =
    "[source]\npath = \"in.csv\"\n[columns]\nid = \"id\"\nperiod = \"P\"\nmode = { value = "
    "\"fundamental\" }\n"
    "pulsator_class = { value = \"classical_cepheid\" }\n[bands.V]\nmag = \"V\"\nerr = \"V_err\"\n";
// A rungcal-fit result with one relation and one parameter; {value} is the parameter's value.
std::string fit_json(const std::string& value,
                     const std::string& covariance = ", \"covariance\": [[0.01]]") {
  return "{\"schema\": \"rungcal-fit\", \"relations\": [{\"name\": \"V\", \"pivot_log_period\": "
         "1.0, "
         "\"parameter_names\": [\"alpha\"], \"parameters\": [{\"name\": \"alpha\", \"mode\": "
         "\"free\", "
         "\"value\": " +
         value + ", \"error\": 0.1}]" + covariance + "}]}";
}
// A stored calibration (store/t/v0001, latest) holding fit.
std::string calibration_json(const std::string& fit) {
  return "{\"schema\": \"rungcal-calibration\", \"schema_version\": 1, \"name\": \"t\", "
         "\"version\": 1, "
         "\"content_sha256\": \"x\", \"config_text\": \"\", \"previous\": null, \"fit\": " +
         fit + "}";
}

std::vector<StageCase> stage_cases() {
  return {
      {"DereddenNoConfig", "deredden", "", {}, "config_value", "--config"},
      {"DereddenUnknownLaw",
       "deredden",
       "--law ccm99 --wavelength 5500",
       {},
       "config_value",
       "ccm99"},
      {"DereddenWavelengthOutsideLaw",
       "deredden",
       "--law ccm89 --rv 3.1 --wavelength 100",
       {},
       "outside_law_range",
       "ccm89"},
      {"DereddenNegativeRv",
       "deredden",
       "--config {dir}/d.toml --out {dir}/out/c.fits",
       {{"d.toml", "[deredden]\ninput = \"x.fits\"\nr_v = -1\n"}},
       "config_value",
       "d.toml"},
      {"DereddenImplausibleRv",
       "deredden",
       "--config {dir}/d.toml --out {dir}/out/c.fits",
       {{"d.toml", "[deredden]\ninput = \"x.fits\"\nr_v = 1e308\n"}},
       "config_value",
       "r_v"},
      {"FitNegativeFixedScatter",
       "fit",
       "--config {dir}/f.toml",
       {{"f.toml",
         "[fit]\ninput = \"x.fits\"\nscatter = { mode = \"fixed\", value = -0.1 }\n" + kRelation}},
       "config_value",
       "scatter"},
      {"FitPriorWithoutWidth",
       "fit",
       "--config {dir}/f.toml",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\n" + kRelation +
                       "gamma = { mode = \"prior\", value = -0.2, sigma = 0 }\n"}},
       "config_value",
       "gamma"},
      {"FitQuadratureOrderOutOfRange",
       "fit",
       "--config {dir}/f.toml",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\nquadrature_nodes = 500\n" + kRelation}},
       "config_value",
       "quadrature_nodes"},
      {"FitDistancePriorThatCannotBeNormalised",
       "fit",
       "--config {dir}/f.toml",
       {{"f.toml",
         "[fit]\ninput = \"x.fits\"\ndistance_prior = \"generalized_gamma\"\ndistance_power = "
         "-2\n" +
             kRelation}},
       "config_value",
       "distance_power"},
      {"FitRobustLossWithTheHierarchicalModel",
       "fit",
       "--config {dir}/f.toml",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\nloss = \"huber\"\n" + kRelation}},
       "config_value",
       "loss"},
      {"DereddenMissingInput",
       "deredden",
       "--config {dir}/d.toml --out {dir}/out/c.fits",
       {{"d.toml", "[deredden]\ninput = \"x.fits\"\n"}},
       "unreadable_file",
       "x.fits"},
      {"DereddenUnknownKey",
       "deredden",
       "--config {dir}/d.toml --out {dir}/out/c.fits",
       {{"d.toml", "[deredden]\ninput = \"x.fits\"\nlaww = \"ccm89\"\n"}},
       "unknown_config_key",
       "laww"},
      {"FitUnknownLoss",
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\nloss = \"quadratic\"\n" + kRelation}},
       "config_value",
       "quadratic"},
      {"FitNegativeBootstrap",
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\nbootstrap = -3\n" + kRelation}},
       "config_value",
       "bootstrap"},
      {"FitBootstrapTooLarge",  // issue 15: 2^31-1 resamples ended in bad_alloc
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\nbootstrap = 2147483647\n" + kRelation}},
       "config_value",
       "must be 0 to 100000 resamples"},
      {"PublishSetLatestToAMissingVersion",
       "publish",
       "--store {dir}/store --name cal --set-latest 3",
       {},
       "unknown_calibration",
       "no version 3"},
      {"FitNoFitTable",
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fitt]\n"}},
       "config_missing_key",
       "f.toml"},
      {"FitInputNotFits",
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fit]\ninput = \"cat.fits\"\n" + kRelation},
        {"cat.fits", "id,period\nA,3.2\n"}},
       "fits_read",
       "cat.fits"},
      {"PublishMissingFit",
       "publish",
       "--store {dir}/out --name t --fit {dir}/nothere.json",
       {},
       "unreadable_file",
       "nothere.json"},
      {"PublishFitNotJson",
       "publish",
       "--store {dir}/out --name t --fit {dir}/bad.json",
       {{"bad.json", "{not json"}},
       "json_syntax",
       "bad.json"},
      {"PublishNotAFitResult",
       "publish",
       "--store {dir}/out --name t --fit {dir}/other.json",
       {{"other.json", "{\"schema\": \"other\"}"}},
       "not_a_fit_result",
       "other.json"},
      {"PublishBadName",
       "publish",
       "--store {dir}/out --name a/b --fit {dir}/other.json",
       {{"other.json", "{}"}},
       "config_value",
       "name"},
      {"ApplyUnknownCalibration",
       "apply",
       "--store {dir}/store --calibration t@latest --relation W_VI --targets x.fits --out "
       "{dir}/out/d.fits",
       {},
       "unknown_calibration",
       "store"},
      {"ReportUnknownVersion",
       "report",
       "--store {dir}/store --calibration t@3 --out {dir}/out",
       {},
       "unknown_calibration",
       "store"},
      {"DiffUnknownCalibration",
       "diff",
       "--store {dir}/store --to t@latest",
       {},
       "unknown_calibration",
       "store"},
      {"SimulateUnknownKey",
       "simulate",
       "--config {dir}/s.toml",
       {{"s.toml", "[simulate]\nseedd = 3\noutput_folder = \"out\"\n"}},
       "unknown_config_key",
       "seedd"},
      {"RunNoRunTable",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", "[ingest]\nconfig = \"x.toml\"\n"}},
       "config_missing_key",
       "r.toml"},
      {"RunApplyWithoutTargets",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", "[run]\nfolder = \"out\"\ncalibration = \"c\"\n[ingest]\nconfig = \"" + kDemo +
                       "/ingest.toml\"\n[deredden]\nconfig = \"" + kDemo +
                       "/deredden.toml\"\n[fit]\nconfig = \"" + kDemo +
                       "/fit.toml\"\n[apply]\nrelation = \"W_VI\"\n"}},
       "config_missing_key",
       "targets_ingest"},
      {"RunMissingConfig",
       "run",
       "--config {dir}/nothere.toml",
       {},
       "unreadable_file",
       "nothere.toml"},
      {"RunStageConfigMissing",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml",
         "[run]\nfolder = \"out\"\ncalibration = \"c\"\n[ingest]\nconfig = "
         "\"gone.toml\"\n[deredden]\nconfig = \"" +
             kDemo + "/deredden.toml\"\n[fit]\nconfig = \"" + kDemo + "/fit.toml\"\n"}},
       "unreadable_file",
       "gone.toml",
       "out/catalog.fits"},
      {"LightcurveMissingConfig",
       "lightcurve",
       "--config {dir}/nothere.toml",
       {},
       "unreadable_file",
       "nothere.toml"},
      // Issue 15, file safety: outputs and inputs that are not regular files, symlinked
      // lock and log files.
      {"IngestOutputIsAFifo",
       "ingest",
       kTargets + " --out {dir}/out.fits",
       {},
       "output_not_regular_file",
       "out.fits",
       "out",
       "mkfifo out.fits"},
      {"IngestOutputIsAFolder",
       "ingest",
       kTargets + " --out {dir}/out.fits",
       {},
       "output_not_regular_file",
       "out.fits",
       "out",
       "mkdir out.fits"},
      {"IngestInputIsAFifo",
       "ingest",
       kTargets + " --input {dir}/in.csv --out {dir}/out/t.fits",
       {},
       "input_not_regular_file",
       "in.csv",
       "out",
       "mkfifo in.csv"},
      {"IngestInputIsAFolder",
       "ingest",
       kTargets + " --input {dir}/in.csv --out {dir}/out/t.fits",
       {},
       "input_not_regular_file",
       "in.csv",
       "out",
       "mkdir in.csv"},
      {"IngestConfigIsAFifo",
       "ingest",
       "--config {dir}/c.toml --out {dir}/out/t.fits",
       {},
       "input_not_regular_file",
       "c.toml",
       "out",
       "mkfifo c.toml"},
      {"RunConfigIsAFolder",
       "run",
       "--config {dir}/r.toml",
       {},
       "input_not_regular_file",
       "r.toml",
       "out",
       "mkdir r.toml"},
      {"RunInputIsAFifo",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", test::replaced(kPipeline, {{"[ingest]\n", "[ingest]\ninput = \"in.fits\"\n"}})}},
       "input_not_regular_file",
       "in.fits",
       "out/catalog.fits",
       "mkfifo in.fits"},
      {"RunCalibrationNameLeavingTheStore",  // issue 15 item 8: refused only after stages ran
       "run",
       "--config {dir}/r.toml",
       {{"r.toml",
         test::replaced(kPipeline, {{"calibration = \"c\"", "calibration = \"../../x\""}})}},
       "config_value",
       "run.calibration"},
      {"RunUnknownApplyRelation",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", kPipeline + "[apply]\nrelation = \"W_XX\"\ntargets_ingest = \"" + kDemo +
                       "/ingest_targets.toml\"\ntargets_deredden = \"" + kDemo +
                       "/deredden_targets.toml\"\n"}},
       "unknown_relation",
       "apply.relation"},
      {"RunNegativeBootstrap",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", kPipeline + "bootstrap = -5\n"}},
       "config_value",
       "fit.bootstrap"},
      {"ReportStarWithoutLightCurves",
       "report",
       "--store {dir}/store --calibration t@latest --out {dir}/out --star X",
       {{"store/t/v0001/calibration.json", calibration_json(fit_json("-5.0"))}},
       "needs_lightcurves",
       "--star",
       "out",
       "ln -s v0001 store/t/latest"},
      {"RunLockFileIsASymlink",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", kPipeline}},
       "write_failed",
       "Too many levels of symbolic links",
       "victim",
       "mkdir out && ln -s ../victim out/.run.lock"},
      {"RunLogFileIsASymlink",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", kPipeline}},
       "write_failed",
       "symlink",
       "victim",
       "mkdir -p out/logs && ln -s ../../victim out/logs/rungcal-run.log"},
      {"PublishFitIsAFifo",
       "publish",
       "--store {dir}/out --name t --fit {dir}/fit.json",
       {},
       "input_not_regular_file",
       "fit.json",
       "out",
       "mkfifo fit.json"},
      // Issue 15, cfitsio's extended filename syntax: "cal[1].fits" is a file name.
      {"IngestFitsNameWithBracketsIsReadAsItsFile",
       "ingest",
       "--config " + kDemo + "/ingest.toml --input '{dir}/cal[1].fits' --out '{dir}/run(2)/c.fits'",
       {{"cal[1].fits", "not FITS"}},
       "fits_read",
       "cal[1].fits: [fits_read] HDU 1 header has no END card",
       "run(2)/c.fits"},
      // Issue 15, internal errors that are bad input.
      {"IngestIdNotUtf8",
       "ingest",
       kTargets + " --input {dir}/in.csv --out {dir}/out/t.fits",
       {{"in.csv", kTargetsHeader + kTargetsLine +
                       "VEY-\xff"
                       "02,Veyra Spiral,20.1,0.1,0.02,-0.1,24.0,0.08,23.5,0.07,22.1,0.08\n"}},
       "invalid_utf8",
       "in.csv:line 3: column 'id'"},
      {"IngestFitsInputIsASymlinkLoop",
       "ingest",
       "--config " + kDemo + "/ingest.toml --input {dir}/cal.fits --out {dir}/out/c.fits",
       {},
       "unreadable_file",
       "Too many levels of symbolic links",
       "out",
       "ln -s loop cal.fits && ln -s cal.fits loop"},
      {"RunLogFilesNegative",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", test::replaced(kPipeline, {{"calibration = \"c\"\n",
                                               "calibration = \"c\"\nlog_files = -1\n"}})}},
       "config_value",
       "log_files"},
      {"RunFolderIsAFile",
       "run",
       "--config {dir}/r.toml",
       {{"r.toml", kPipeline}, {"out", "a file"}},
       "run_folder_not_a_folder",
       "out",
       "out/catalog.fits"},
      {"PublishFitNestedTooDeep",
       "publish",
       "--store {dir}/out --name t --fit {dir}/fit.json",
       {{"fit.json", std::string(100000, '[') + std::string(100000, ']')}},
       "json_too_deep",
       "fit.json"},
      {"PublishFitWithoutRelations",
       "publish",
       "--store {dir}/out --name t --fit {dir}/fit.json",
       {{"fit.json", "{\"schema\": \"rungcal-fit\"}"}},
       "fit_schema",
       "relations"},
      {"PublishFitStringValue",
       "publish",
       "--store {dir}/out --name t --fit {dir}/fit.json",
       {{"fit.json", fit_json("\"12.5\"")}},
       "fit_schema",
       "relations[0].parameters[0].value"},
      {"PublishFitNullValue",
       "publish",
       "--store {dir}/out --name t --fit {dir}/fit.json",
       {{"fit.json", fit_json("null")}},
       "fit_schema",
       "relations[0].parameters[0].value"},
      {"PublishFitNumberBeyondDouble",
       "publish",
       "--store {dir}/out --name t --fit {dir}/fit.json",
       {{"fit.json", fit_json("1e400")}},
       "json_syntax",
       "1e400"},
      {"DiffStoredCalibrationWithoutCovariance",
       "diff",
       "--store {dir}/store --to t@latest",
       {{"store/t/v0001/calibration.json", calibration_json(fit_json("-2.5", ""))}},
       "fit_schema",
       "relations[0].covariance",
       "out",
       "ln -s v0001 store/t/latest"},
      {"ApplyStoredCalibrationWithoutCovariance",
       "apply",
       "--store {dir}/store --calibration t@latest --relation V --targets x.fits --out "
       "{dir}/out/d.fits",
       {{"store/t/v0001/calibration.json", calibration_json(fit_json("-2.5", ""))}},
       "fit_schema",
       "covariance",
       "out",
       "ln -s v0001 store/t/latest"},
      // Issue 15, limits: non-finite config numbers, a runaway field, unknown policies.
      {"FitMaxRuweNan",
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\nmax_ruwe = nan\n" + kRelation}},
       "config_value",
       "max_ruwe"},
      {"FitPivotLogPeriodNan",
       "fit",
       "--config {dir}/f.toml --out {dir}/out/f.json",
       {{"f.toml", "[fit]\ninput = \"x.fits\"\n" + kRelation + "pivot_log_period = nan\n"}},
       "config_value",
       "pivot_log_period"},
      {"IngestParallaxLimitInfinite",
       "ingest",
       "--config {dir}/c.toml --out {dir}/out/t.fits",
       {{"c.toml", kIngestConfig + "[validate]\nparallax_max_mas = inf\n"}},
       "config_value",
       "parallax_max_mas"},
      {"IngestPeriodRangeNotPositive",
       "ingest",
       "--config {dir}/c.toml --out {dir}/out/t.fits",
       {{"c.toml", kIngestConfig + "[validate]\nperiod_range_d = [0.0, 10.0]\n"}},
       "config_value",
       "period_range_d"},
      {"IngestOneHugeField",
       "ingest",
       kTargets + " --input {dir}/in.csv --out {dir}/out/t.fits",
       {{"in.csv", kTargetsHeader + kTargetsLine + "VEY-0002," + std::string(10u << 20, 'x') +
                       ",20.1,0.1,0.02,-0.1,24.0,0.08,23.5,0.07,22.1,0.08\n"}},
       "field_too_long",
       "in.csv:line 3: column 'host'"},
  };
}

std::string with_dir(std::string text, const std::string& dir) {
  for (std::size_t at; (at = text.find("{dir}")) != std::string::npos;) text.replace(at, 5, dir);
  return text;
}

class StageBadInput : public ::testing::TestWithParam<StageCase> {};

TEST_P(StageBadInput, StopsWithExit2ItsRuleAndWritesNothing) {
  const StageCase& c = GetParam();
  test::TempDir dir;
  for (const auto& [name, content] : c.files) {
    fs::create_directories(fs::path(dir.file(name)).parent_path());
    test::write_text(dir.file(name), content);
  }
  if (!c.setup.empty()) {
    ASSERT_EQ(test::run_command("cd " + dir.path() + " && " + c.setup).exit_code, 0) << c.setup;
  }
  // A stage that opened a FIFO would wait for a writer forever: timeout (coreutils) ends it
  // with 124, a plain failure here, instead of the suite's per-test limit.
  auto r = test::run_command("cd " + dir.path() + " && timeout 60 " + std::string(RUNGCAL_BIN_DIR) +
                             "/rungcal-" + c.stage + " " + with_dir(c.args, dir.path()));
  EXPECT_NE(r.exit_code, 124) << "the stage hung on " << c.name;
  EXPECT_EQ(r.exit_code, 2) << r.output;
  EXPECT_NE(r.output.find("[" + c.rule + "]"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find(c.names), std::string::npos) << r.output;
  EXPECT_FALSE(fs::exists(dir.file(c.must_not_exist))) << c.must_not_exist << " was written";
  for (const auto& e : fs::recursive_directory_iterator(
           dir.path(), fs::directory_options::skip_permission_denied)) {
    EXPECT_EQ(e.path().string().find(".part"), std::string::npos) << e.path();
  }
}

INSTANTIATE_TEST_SUITE_P(Cases, StageBadInput, ::testing::ValuesIn(stage_cases()),
                         [](const auto& case_info) { return std::string(case_info.param.name); });

// Valid input that a stage once refused or failed on (issue 15): each must now exit 0 and
// write its product, with nothing else left in the folder.
TEST(StageValidInput, RefusedRowsLeavingWholeFitsBlocksOfKeptRows) {
  // The reproduction: the demo's targets.csv cut to its first 21 data lines, one
  // period set to -1; the 20 kept rows fill whole 2880-byte blocks of the catalog.
  test::TempDir dir;
  const std::string all = test::read_text(test::source_file("sample_data/targets.csv"));
  std::string cut;
  std::size_t at = 0;
  for (int line = 0; line < 22; ++line) {
    const std::size_t end = all.find('\n', at);
    std::string text = all.substr(at, end - at + 1);
    if (line == 5) {  // the fifth star: its period (third field) becomes -1
      const std::size_t a = text.find(',', text.find(',') + 1) + 1;
      text.replace(a, text.find(',', a) - a, "-1");
    }
    cut += text;
    at = end + 1;
  }
  test::write_text(dir.file("in.csv"), cut);
  auto r = test::run_command(std::string(RUNGCAL_BIN_DIR) + "/rungcal-ingest " + kTargets +
                             " --input " + dir.file("in.csv") + " --out " + dir.file("out/t.fits"));
  ASSERT_EQ(r.exit_code, 0) << r.output;
  auto py = test::run_python(
      "import sys\nfrom astropy.io import fits\nh = fits.open(sys.argv[1])\n"
      "print(h['CATALOG'].header['NAXIS1'] * h['CATALOG'].header['NAXIS2'] % 2880, "
      "len(h['CATALOG'].data), "
      "len(h['REJECTS'].data))",
      {dir.file("out/t.fits")});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  EXPECT_EQ(test::parse_numbers(py.output), (std::vector<double>{0, 20, 1}));  // astropy's count
}

TEST(StageValidInput, FitsNamesWithCfitsioSyntaxAreFiles) {
  // cal[1].fits read, into a folder run[1] and one run(2): the products and nothing else.
  test::TempDir dir;
  fs::copy_file(test::source_file("sample_data/calibrators.fits"), dir.file("cal[1].fits"));
  for (const std::string folder : {"run[1]", "run(2)"}) {
    auto r =
        test::run_command(std::string(RUNGCAL_BIN_DIR) + "/rungcal-ingest --config " + kDemo +
                          "/ingest.toml --input " + test::shell_quote(dir.file("cal[1].fits")) +
                          " --out " + test::shell_quote(dir.file(folder + "/c.fits")));
    ASSERT_EQ(r.exit_code, 0) << r.output;
    std::vector<std::string> made;
    for (const auto& e : fs::directory_iterator(dir.file(folder)))
      made.push_back(e.path().filename().string());
    std::sort(made.begin(), made.end());
    EXPECT_EQ(made, (std::vector<std::string>{"c.fits", "c_rejects.csv"})) << folder;
  }
  std::vector<std::string> top;
  for (const auto& e : fs::directory_iterator(dir.path()))
    top.push_back(e.path().filename().string());
  std::sort(top.begin(), top.end());
  EXPECT_EQ(top, (std::vector<std::string>{"cal[1].fits", "run(2)", "run[1]"}));
}

TEST(StageCommandLine, EveryStageAnswersVersionAndItsHelpShowsDefaultsAndExitCodes) {
  // Issue 15, "unattended runs must be honest": --version, defaults and exit codes in --help.
  for (const char* stage : {"lightcurve", "ingest", "deredden", "fit", "publish", "report", "apply",
                            "diff", "grid", "run", "simulate", "study"}) {
    auto version = test::run_stage(stage, "--version");
    EXPECT_EQ(version.exit_code, 0) << stage << version.output;
    EXPECT_NE(version.output.find("(commit "), std::string::npos) << stage << version.output;
    auto help = test::run_stage(stage, "--help");
    EXPECT_EQ(help.exit_code, 0) << stage;
    EXPECT_NE(help.output.find("Exit codes: 0 success"), std::string::npos) << stage;
    EXPECT_NE(help.output.find("7 cannot write"), std::string::npos) << stage;
  }
  const std::string apply = test::run_stage("apply", "--help").output;
  const std::string line = apply.substr(apply.find("--outlier-sigma"), 80);
  EXPECT_NE(line.find("=3"), std::string::npos) << line;
  const std::string publish = test::run_stage("publish", "--help").output;
  EXPECT_NE(publish.find("=60"), std::string::npos) << publish;  // --lock-wait
}

TEST(StageCommandLine, QuietKeepsErrors) {
  // -q silences the summary on stdout (Run.QuietPrintsNothing...), never an error.
  test::TempDir dir;
  auto r = test::run_command(std::string(RUNGCAL_BIN_DIR) + "/rungcal-publish -q --store " +
                             dir.file("s") + " --name c --set-latest 1");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[unknown_calibration]"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace rungcal
