// SPDX-License-Identifier: MIT
// Tests of lib/rungcal/report/site and html: the status page of a calibration. The page is
// rendered by Debian's chromium, headless (installed by scripts/setup-debian.sh test), and
// its DOM and a screenshot are checked against the calibration files.
#include <cairo.h>
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <regex>

#include <fmt/format.h>

#include "reference_store.hpp"
#include "rungcal/calibration/store.hpp"
#include "rungcal/ingest/ingest.hpp"
#include "rungcal/plfit/fit_stage.hpp"
#include "rungcal/report/html.hpp"
#include "rungcal/report/run_history.hpp"
#include "rungcal/report/site.hpp"
#include "test_util.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

TEST(Html, TextIsEscapedAndTablesHaveHeaders) {
  EXPECT_EQ(html_escape("<a href=\"x\">&'"), "&lt;a href=&quot;x&quot;&gt;&amp;&#39;");
  HtmlTable t{"cap <1>", {"a", "b"}, {{"1", "<script>"}}, {"alarm"}};
  const std::string h = html_table(t);
  EXPECT_NE(h.find("<caption>cap &lt;1&gt;</caption>"), std::string::npos);
  EXPECT_NE(h.find("<th scope=\"col\">a</th>"), std::string::npos);
  EXPECT_NE(h.find("<tr class=\"alarm\"><td>1</td><td>&lt;script&gt;</td></tr>"),
            std::string::npos);
}

TEST(Html, AHistoryChartHasOnePointPerVersionAndSaysItsValues) {
  const std::string svg = history_chart_svg(
      "W_VI alpha",
      {{1, -5.9, 0.02, false, false}, {2, -5.95, 0.02, true, false}, {3, -6.1, NAN, false, true}});
  const std::regex point("data-version=\"(\\d+)\"");
  const auto points =
      std::distance(std::sregex_iterator(svg.begin(), svg.end(), point), std::sregex_iterator());
  EXPECT_EQ(points, 3);
  EXPECT_NE(svg.find("<title>W_VI alpha</title>"), std::string::npos);
  EXPECT_NE(svg.find("version 2: -5.95 ± 0.02 (withdrawn)"), std::string::npos) << svg;
  EXPECT_NE(svg.find("version 3: -6.1 (drift alarm)"), std::string::npos) << svg;
  EXPECT_EQ(std::count(svg.begin(), svg.end(), '\n') > 5, true);
}

// Three versions of the Riess et al. 2018 reference fit (the adopted scatter changed), the
// second withdrawn, and a run history of two runs.
struct SiteFixture {
  test::TempDir dir;
  SiteOptions options;
  SiteFixture() {
    test::publish_reference_versions(dir, "ref", {0.06, 0.10, 0.08});
    set_latest_version(dir.file("store"), "ref", 3, 5);  // a no-op: 3 is the newest
    append_run_record(dir.file("run/run_history.json"),
                      {"2026-12-01T02:00:00Z", 6, "rungcal-run: new calibration ref@1"});
    append_run_record(dir.file("run/run_history.json"),
                      {"2026-12-02T02:00:00Z", 2, "rungcal-run: stopped: <bad>"});
    options.store = dir.file("store");
    options.calibration = "ref";
    options.out_dir = dir.file("run/site");
    options.run_folder = dir.file("run");
    options.drift_alarm_sigma = 0.5;  // low enough that the scatter changes raise one
  }
};

TEST(Site, ThePageHoldsEveryVersionTheLatestValuesAndTheRuns) {
  SiteFixture f;
  const SiteOutcome out = write_site(f.options);
  EXPECT_EQ(out.versions, 3);
  EXPECT_EQ(out.figures, 2);
  const std::string page = test::read_text(f.options.out_dir + "/index.html");
  EXPECT_NE(page.find("<h1>ref</h1>"), std::string::npos);
  EXPECT_NE(page.find("Latest version: <strong>3</strong>"), std::string::npos);
  // The latest offset, as the calibration file has it.
  const Calibration latest = load_calibration(f.options.store, "ref@latest");
  for (const auto& p : latest.relation("W_H").at("parameters")) {
    const std::string cell = p.at("error").is_null()
                                 ? fmt::format("{:.5g}", p.at("value").get<double>())
                                 : fmt::format("{:.5g} ± {:.2g}", p.at("value").get<double>(),
                                               p.at("error").get<double>());
    EXPECT_NE(page.find("<td>" + cell + "</td>"), std::string::npos) << cell;
  }
  EXPECT_NE(page.find("drift alarm"), std::string::npos);
  EXPECT_NE(page.find("rungcal-run: stopped: &lt;bad&gt;"), std::string::npos);  // escaped
  EXPECT_NE(page.find("2 (bad_input)"), std::string::npos);
  EXPECT_NE(page.find("alt=\"Period-luminosity diagram of W_H"), std::string::npos);
  EXPECT_TRUE(fs::exists(f.options.out_dir + "/pl_W_H.svg"));
  EXPECT_NE(page.find("href=\"../../store/ref/v0003/calibration.json\""), std::string::npos);
  EXPECT_EQ(page.find("http://"),
            page.find("http://www.w3.org/2000/svg"));  // nothing from the network
  EXPECT_EQ(page.find("<script"), std::string::npos);
  for (const auto& e : fs::directory_iterator(f.options.out_dir))
    EXPECT_EQ(e.path().filename().string().find(".part"), std::string::npos) << e.path();
}

TEST(Site, ChromiumRendersThePageWithEveryVersionPlotted) {
  const std::string chromium = "/usr/bin/chromium";
  if (!fs::exists(chromium))
    GTEST_SKIP() << "chromium is not installed (scripts/setup-debian.sh test installs it)";
  SiteFixture f;
  write_site(f.options);
  const std::string flags =
      " --headless --no-sandbox --disable-gpu --disable-quic --no-first-run "
      "--disable-background-networking "
      "--disable-component-update --disable-sync --user-data-dir=" +
      f.dir.file("chromium-profile");
  const std::string url = "file://" + f.options.out_dir + "/index.html";
  auto dom =
      test::run_command("timeout 120 " + chromium + flags + " --dump-dom " + url + " 2>/dev/null");
  ASSERT_EQ(dom.exit_code, 0) << dom.output;
  // One chart per parameter of W_H, each with a point per version.
  const Calibration latest = load_calibration(f.options.store, "ref@latest");
  // The charted parameters: the fitted ones, not the distance prior's hyperparameters.
  std::size_t parameters = 0;
  for (const auto& p : latest.relation("W_H").at("parameters")) {
    const std::string name = p.at("name");
    parameters +=
        p.at("mode") != "fixed" && name.rfind("distance_", 0) != 0 && name.rfind("feh_", 0) != 0;
  }
  ASSERT_GE(parameters, 2u);
  std::size_t points = 0;
  for (std::size_t at = 0; (at = dom.output.find("data-version=", at)) != std::string::npos; ++at)
    ++points;
  EXPECT_EQ(points, 3 * parameters) << dom.output.substr(0, 2000);
  EXPECT_NE(dom.output.find("<h2>Parameters across versions</h2>"), std::string::npos);
  auto shot = test::run_command("timeout 120 " + chromium + flags +
                                " --window-size=1280,2400 --screenshot=" + f.dir.file("page.png") +
                                " " + url + " 2>&1");
  ASSERT_EQ(shot.exit_code, 0) << shot.output;
  cairo_surface_t* img = cairo_image_surface_create_from_png(f.dir.file("page.png").c_str());
  ASSERT_EQ(cairo_surface_status(img), CAIRO_STATUS_SUCCESS);
  EXPECT_EQ(cairo_image_surface_get_width(img), 1280);
  // The page drew something: the figures and tables leave many non-white pixels.
  const int stride = cairo_image_surface_get_stride(img), h = cairo_image_surface_get_height(img);
  const unsigned char* data = cairo_image_surface_get_data(img);
  long inked = 0;
  for (int y = 0; y < h; ++y)
    for (int x = 0; x < 1280; ++x) inked += data[y * stride + 4 * x] < 200;
  EXPECT_GT(inked, 20000);
  cairo_surface_destroy(img);
}

}  // namespace
}  // namespace rungcal
