// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/calibration and pipeline/rungcal-publish: the calibration file and
// its FITS copy, the versioned store (idempotent, crash-safe, serialised publishers), and
// predictions with their errors. Distances from a calibration: apply_test.cpp.
#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <fstream>

#include <fmt/format.h>

#include "rungcal/calibration/diff.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/table/fits_io.hpp"
#include "test_util.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

// A fit result of the Riess et al. 2018 reference table, written where the test wants it;
// `scatter` changes its content.
std::string write_reference_fit(const test::TempDir& dir, const std::string& name,
                                double scatter = 0.06) {
  IngestOptions io =
      ingest_options_from_file(test::source_file("config/reference/mw_cepheids_hst_gaiadr2.toml"));
  io.catalog_path = dir.file("cat.fits");
  write_ingest_products(run_ingest(io), io);
  FitOptions o =
      fit_options_from_file(test::source_file("config/reference/fit_mw_cepheids_dr2.toml"));
  o.input_path = dir.file("cat.fits");
  o.output_path = dir.file(name + ".json");
  o.scatter.value = scatter;
  fit_catalog_file(o);
  return o.output_path;
}

PublishOptions publish_options(const test::TempDir& dir, const std::string& fit) {
  PublishOptions p;
  p.store = dir.file("store");
  p.name = "mw-dr2";
  p.fit_path = fit;
  p.lock_wait_seconds = 5;
  return p;
}

TEST(Calibration, PublishLoadPredictRoundTripAndTheFitsCopy) {
  test::TempDir dir;
  std::string fit = write_reference_fit(dir, "fit");
  PublishOutcome out = publish_calibration(publish_options(dir, fit));
  ASSERT_TRUE(out.created);
  EXPECT_EQ(out.version, 1);
  Calibration cal = load_calibration(dir.file("store"), "mw-dr2@latest");
  EXPECT_EQ(cal.label(), "mw-dr2@1");
  EXPECT_EQ(cal.relation_names(), std::vector<std::string>{"W_H"});
  // The fit's numbers come back: M(log P = 1) = alpha (slope fixed, so its error is alpha's).
  auto fit_json = nlohmann::json::parse(test::read_text(fit));
  double alpha = fit_json["relations"][0]["parameters"][0]["value"],
         alpha_err = fit_json["relations"][0]["parameters"][0]["error"];
  Prediction p = predict_absolute_magnitude(cal, "W_H", 1.0);
  EXPECT_DOUBLE_EQ(p.abs_mag, alpha);
  EXPECT_NEAR(p.calibration_error, alpha_err, 1e-12);
  EXPECT_DOUBLE_EQ(p.intrinsic_scatter, 0.06);
  // Slope -3.26 (fixed): M(log P = 1.5) = alpha - 1.63.
  EXPECT_NEAR(predict_absolute_magnitude(cal, "W_H", 1.5).abs_mag, alpha - 1.63, 1e-12);
  // The FITS copy holds the same content: the JSON verbatim and the parameter table.
  SourceTable doc = read_fits_table(out.folder + "/calibration.fits", {"CALJSON", 0});
  EXPECT_EQ(nlohmann::json::parse(doc.table.column("json").text[0]), cal.document);
  SourceTable params = read_fits_table(out.folder + "/calibration.fits", {"PARAMS", 0});
  EXPECT_EQ(params.table.column("parameter").text[0], "alpha");
  EXPECT_DOUBLE_EQ(params.table.column("value").real[0], alpha);
  EXPECT_EQ(std::get<std::int64_t>(params.table.keyword("RGCALVER")->value), 1);
}

TEST(Calibration, IdenticalContentMakesOneVersionChangedContentTheNext) {
  test::TempDir dir;
  std::string fit = write_reference_fit(dir, "fit");
  EXPECT_TRUE(publish_calibration(publish_options(dir, fit)).created);
  // The same fit rerun (new creation time) is the same content.
  std::string again = write_reference_fit(dir, "again");
  PublishOutcome same = publish_calibration(publish_options(dir, again));
  EXPECT_FALSE(same.created);
  EXPECT_EQ(same.version, 1);
  // A changed input (here the adopted scatter) makes version 2 with its shifts.
  PublishOutcome next =
      publish_calibration(publish_options(dir, write_reference_fit(dir, "changed", 0.10)));
  ASSERT_TRUE(next.created);
  EXPECT_EQ(next.version, 2);
  EXPECT_TRUE(next.shifts["W_H"].contains("parallax_offset_mas"));
  EXPECT_EQ(calibration_versions(dir.file("store"), "mw-dr2"), (std::vector<int>{1, 2}));
  Calibration v2 = load_calibration(dir.file("store"), "mw-dr2@latest");
  EXPECT_EQ(v2.document["previous"]["version"], 1);
  EXPECT_EQ(load_calibration(dir.file("store"), "mw-dr2@1").version(), 1);
  // A version is digits only: "1abc", "+1", " 1", "0" and "" name no version.
  for (const char* bad : {"mw-dr2@1abc", "mw-dr2@+1", "mw-dr2@ 1", "mw-dr2@0", "mw-dr2@"}) {
    try {
      load_calibration(dir.file("store"), bad);
      ADD_FAILURE() << bad << " was accepted";
    } catch (const InputError& e) {
      EXPECT_EQ(e.rule(), "unknown_calibration") << bad;
    }
    EXPECT_EQ(calibration_file(dir.file("store"), bad), "") << bad;
  }
}

void expect_store_whole(const std::string& store, const std::string& name) {
  for (int v : calibration_versions(store, name)) {
    Calibration c = load_calibration(store, name + "@" + std::to_string(v));  // parses
    EXPECT_EQ(c.version(), v);
    EXPECT_TRUE(
        fs::exists(fs::path(store) / name / fmt::format("v{:04d}", v) / "calibration.fits"));
  }
}

TEST(Calibration, AKillAtAnyStepLeavesOnlyWholeVersions) {
  // Fault injection (RUNGCAL_FAULT_AT, SIGKILL at a named step) at every step of publish;
  // after each kill the store holds only whole versions, 'latest' resolves to one of them,
  // and the next publish finishes the work.
  test::TempDir dir;
  std::string fit1 = write_reference_fit(dir, "one"), fit2 = write_reference_fit(dir, "two", 0.10);
  const std::string store = dir.file("store");
  ASSERT_TRUE(publish_calibration(publish_options(dir, fit1)).created);
  for (const char* step : {"publish_locked", "publish_json_written", "publish_version_built",
                           "publish_version_renamed", "publish_link_made", "publish_done"}) {
    auto r =
        test::run_command(std::string("RUNGCAL_FAULT_AT=") + step + " " + RUNGCAL_BIN_DIR +
                          "/rungcal-publish --store " + store + " --name mw-dr2 --fit " + fit2);
    EXPECT_EQ(r.exit_code, 128 + 9) << step << ": " << r.output;
    expect_store_whole(store, "mw-dr2");
    Calibration latest = load_calibration(store, "mw-dr2@latest");
    EXPECT_TRUE(latest.version() >= 1);
    // Finish the work (or find it done), then go back to fit 1's content for the next step.
    auto done = test::run_stage("publish", "--store " + store + " --name mw-dr2 --fit " + fit2);
    EXPECT_EQ(done.exit_code, 0) << done.output;
    EXPECT_EQ(load_calibration(store, "mw-dr2@latest").document["content_sha256"],
              calibration_content_sha256(nlohmann::json::parse(test::read_text(fit2)), ""));
    ASSERT_EQ(
        test::run_stage("publish", "--store " + store + " --name mw-dr2 --fit " + fit1).exit_code,
        0);
  }
  expect_store_whole(store, "mw-dr2");
  // No temporary folder survives a finished publish.
  for (const auto& e : fs::directory_iterator(fs::path(store) / "mw-dr2"))
    EXPECT_NE(e.path().filename().string().rfind(".v", 0), 0u) << e.path();
}

TEST(Calibration, ConcurrentPublishersAreSerialisedAndLoseNothing) {
  test::TempDir dir;
  std::vector<std::string> fits;
  for (int k = 0; k < 4; ++k)
    fits.push_back(write_reference_fit(dir, "f" + std::to_string(k), 0.05 + 0.01 * k));
  std::string cmd;
  for (int k = 0; k < 4; ++k)
    cmd += std::string(RUNGCAL_BIN_DIR) + "/rungcal-publish --store " + dir.file("store") +
           " --name mw-dr2 --fit " + fits[k] + " > " + dir.file("p" + std::to_string(k) + ".log") +
           " 2>&1; echo $? >> " + dir.file("codes") + " & ";
  auto r = test::run_command(cmd + "wait");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(test::read_text(dir.file("codes")), "0\n0\n0\n0\n");
  EXPECT_EQ(calibration_versions(dir.file("store"), "mw-dr2"), (std::vector<int>{1, 2, 3, 4}));
  expect_store_whole(dir.file("store"), "mw-dr2");
  EXPECT_EQ(load_calibration(dir.file("store"), "mw-dr2@latest").version(), 4);
}

std::vector<int> withdrawn_numbers(const std::string& store, const std::string& name) {
  std::vector<int> out;
  for (const auto& w : withdrawn_versions(store, name)) out.push_back(w.version);
  return out;
}

TEST(Calibration, RollingBackWithdrawsTheVersionsAboveAndTheirContentIsNotRepublished) {
  // The rollback semantics of docs/operations.md (issue 15 item 6).
  test::TempDir dir;
  const std::string store = dir.file("store");
  const std::string fit1 = write_reference_fit(dir, "fit1", 0.06),
                    fit2 = write_reference_fit(dir, "fit2", 0.10);
  ASSERT_TRUE(publish_calibration(publish_options(dir, fit1)).created);
  ASSERT_TRUE(publish_calibration(publish_options(dir, fit2)).created);
  set_latest_version(store, "mw-dr2", 1, 5);
  EXPECT_EQ(latest_version(store, "mw-dr2"), 1);
  EXPECT_EQ(withdrawn_numbers(store, "mw-dr2"), std::vector<int>{2});
  // Version 2's content again: not published, latest stays.
  PublishOutcome again = publish_calibration(publish_options(dir, fit2));
  EXPECT_FALSE(again.created);
  EXPECT_EQ(again.withdrawn_match, 2);
  EXPECT_EQ(again.version, 1);
  EXPECT_EQ(calibration_versions(store, "mw-dr2"), (std::vector<int>{1, 2}));
  // Asked for, it is a new version; 2 stays withdrawn.
  PublishOptions asked = publish_options(dir, fit2);
  asked.republish_withdrawn = true;
  PublishOutcome republished = publish_calibration(asked);
  EXPECT_TRUE(republished.created);
  EXPECT_EQ(republished.version, 3);
  EXPECT_EQ(withdrawn_numbers(store, "mw-dr2"), std::vector<int>{2});
  // A rollback by hand (the link moved with ln/mv) is noticed by the next publisher.
  const fs::path folder = fs::path(store) / "mw-dr2";
  fs::create_directory_symlink("v0001", folder / ".latest.new");
  fs::rename(folder / ".latest.new", folder / "latest");
  PublishOutcome other =
      publish_calibration(publish_options(dir, write_reference_fit(dir, "fit3", 0.08)));
  EXPECT_EQ(other.version, 4);
  EXPECT_EQ(withdrawn_numbers(store, "mw-dr2"), (std::vector<int>{2, 3}));
  EXPECT_EQ(load_calibration(store, "mw-dr2@latest").document["previous"]["version"], 1);
  // Pointing latest at a withdrawn version reinstates it and withdraws those above.
  set_latest_version(store, "mw-dr2", 2, 5);
  EXPECT_EQ(withdrawn_numbers(store, "mw-dr2"), (std::vector<int>{3, 4}));
  try {
    set_latest_version(store, "mw-dr2", 9, 5);
    ADD_FAILURE() << "version 9 does not exist";
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "unknown_calibration");
  }
  EXPECT_EQ(latest_version(store, "mw-dr2"), 2);
  EXPECT_THROW(set_latest_version(store, "../x", 1, 5), InputError);
}

TEST(Calibration, PredictionErrorIsTheAnalyticPropagation) {
  // M = alpha + beta x + gamma [Fe/H], x = log P - 1: var = g^T C g with g = (1, x, [Fe/H]).
  Calibration cal;
  cal.document = {{"name", "t"}, {"version", 1}};
  cal.document["fit"]["relations"] = nlohmann::json::array(
      {{{"name", "V"},
        {"pivot_log_period", 1.0},
        {"parameter_names", {"alpha", "beta", "gamma", "sigma_int"}},
        {"parameters", {{{"value", -4.0}}, {{"value", -2.8}}, {{"value", -0.2}}, {{"value", 0.1}}}},
        {"covariance",
         {{0.0004, 0.0001, 0.0, 0.0},
          {0.0001, 0.0009, 0.00005, 0.0},
          {0.0, 0.00005, 0.01, 0.0},
          {0.0, 0.0, 0.0, 0.0001}}}}});
  Prediction p = predict_absolute_magnitude(cal, "V", 1.5, -0.3);
  const double x = 0.5, f = -0.3;
  EXPECT_NEAR(p.abs_mag, -4.0 - 2.8 * x - 0.2 * f, 1e-12);
  double var = 0.0004 + x * x * 0.0009 + f * f * 0.01 + 2 * x * 0.0001 + 2 * x * f * 0.00005;
  EXPECT_NEAR(p.calibration_error, std::sqrt(var), 1e-12);
  EXPECT_DOUBLE_EQ(p.intrinsic_scatter, 0.1);
  EXPECT_THROW(predict_absolute_magnitude(cal, "V", 1.5), InputError);  // [Fe/H] needed
  EXPECT_THROW(predict_absolute_magnitude(cal, "K", 1.5, 0.0), InputError);
}

TEST(Calibration, BadReferencesAndInputsStopCleanly) {
  test::TempDir dir;
  try {
    load_calibration(dir.file("store"), "nothing@latest");
    ADD_FAILURE();
  } catch (const InputError& e) {
    EXPECT_EQ(e.rule(), "unknown_calibration");
  }
  test::write_text(dir.file("bad.json"), "{\"schema\": \"something-else\"}");
  auto r = test::run_stage(
      "publish", "--store " + dir.file("store") + " --name x --fit " + dir.file("bad.json"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[not_a_fit_result]"), std::string::npos) << r.output;
  r = test::run_stage("publish", "--store " + dir.file("store") + " --name 'bad name' --fit " +
                                     dir.file("bad.json"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("name"), std::string::npos) << r.output;
  test::write_text(dir.file("broken.json"), "{\"schema\": ");
  r = test::run_stage(
      "publish", "--store " + dir.file("store") + " --name x --fit " + dir.file("broken.json"));
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[json_syntax]"), std::string::npos) << r.output;
}

TEST(Diff, ShiftsInputsAndStarsBetweenTwoVersions) {
  // Version 2 of the Riess et al. 2018 fit leaves out one star (its parallax file row
  // changed): the diff names the changed input, the star that left, and shifts whose sigma
  // is the shift over the combined covariance errors.
  test::TempDir dir;
  std::string fit1 = write_reference_fit(dir, "one");
  ASSERT_TRUE(publish_calibration(publish_options(dir, fit1)).created);
  std::string table = test::read_text(test::reference_file("mw_cepheids_hst_gaiadr2.txt"));
  // AA GEM's row (it starts "AA-GEM"): set its FinalAnalysisFlag, the 11th field, to 1.
  ASSERT_NE(table.find("\nAA-GEM  "), std::string::npos);
  std::string edited = table;
  auto row = edited.find("\nAA-GEM  ");
  auto flag_pos = row;
  for (int field = 0; field < 10; ++field) flag_pos = edited.find("  ", flag_pos + 2);
  edited.replace(flag_pos + 2, 1, "1");
  test::write_text(dir.file("edited.txt"), edited);
  IngestOptions io =
      ingest_options_from_file(test::source_file("config/reference/mw_cepheids_hst_gaiadr2.toml"));
  io.input_path = dir.file("edited.txt");
  io.catalog_path = dir.file("cat2.fits");
  write_ingest_products(run_ingest(io), io);
  FitOptions o =
      fit_options_from_file(test::source_file("config/reference/fit_mw_cepheids_dr2.toml"));
  o.input_path = dir.file("cat2.fits");
  o.output_path = dir.file("two.json");
  fit_catalog_file(o);
  ASSERT_TRUE(publish_calibration(publish_options(dir, o.output_path)).created);
  Calibration a = load_calibration(dir.file("store"), "mw-dr2@1"),
              b = load_calibration(dir.file("store"), "mw-dr2@2");
  CalibrationDiff d = diff_calibrations(a, b);
  ASSERT_EQ(d.left.size(), 1u);
  EXPECT_EQ(d.left[0].second, std::vector<std::string>{"AA GEM"});
  EXPECT_TRUE(d.entered.empty());
  ASSERT_EQ(d.inputs.size(), 1u);
  EXPECT_EQ(d.inputs[0].what, "changed");
  for (const auto& s : d.shifts) {
    if (s.parameter != "parallax_offset_mas") continue;
    EXPECT_NEAR(s.shift_in_sigma, s.shift / std::hypot(s.from_error, s.to_error), 1e-12);
    EXPECT_NE(s.shift, 0.0);
  }
  auto r = test::run_stage("diff", "--store " + dir.file("store") + " --to mw-dr2@latest");
  ASSERT_EQ(r.exit_code, 0) << r.output;
  EXPECT_NE(r.output.find("mw-dr2@1 -> mw-dr2@2"), std::string::npos) << r.output;
  EXPECT_NE(r.output.find("1 stars left: AA GEM"), std::string::npos) << r.output;
  r = test::run_stage("diff", "--store " + dir.file("store") + " --to mw-dr2@1");
  EXPECT_EQ(r.exit_code, 2);
  EXPECT_NE(r.output.find("[no_previous_version]"), std::string::npos) << r.output;
}

}  // namespace
}  // namespace rungcal
