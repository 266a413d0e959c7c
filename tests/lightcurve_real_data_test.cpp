// SPDX-License-Identifier: MIT
// rungcal-lightcurve on real survey and archive files, read as published (tests/data/README.md
// names each file's source):
// - OGLE-IV light curves of four LMC Cepheids, one headerless file per star and band in the
//   survey's own layout, read with docs/tutorial.md's survey config and checked against the
//   OGLE-IV catalogue (Soszynski et al. 2015, AcA 65, 297; its fundamental-mode table is
//   ../shared/reference/lmc_fundamental_cepheids.csv);
// - a Gaia DR3 EPOCH_PHOTOMETRY file as the archive's DataLink service writes it (VOTable,
//   BINARY2, one epoch per row, the file name with its spaces), checked against the same file
//   read by astropy (Debian python3-astropy) and against the archive's own magnitudes.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <map>
#include <numbers>
#include <sstream>
#include <string>
#include <vector>

#include "rungcal/lightcurve/gaia_epoch.hpp"
#include "rungcal/lightcurve/lightcurve_stage.hpp"
#include "test_util.hpp"

namespace rungcal {
namespace {

// One line of the OGLE-IV catalogue: id, <I>, <V>, P, sigma_P, epoch of maximum (HJD -
// 2450000), I amplitude, R21, phi21, R31, phi31 (cosine series).
struct OgleEntry {
  double mean_i = 0, mean_v = 0, period = 0, period_err = 0, epoch_max = 0, amplitude_i = 0;
  double r21 = 0, phi21 = 0, r31 = 0, phi31 = 0;
};

// A catalogue cell: "-" is a missing value.
double number(const std::string& cell) { return cell == "-" ? std::nan("") : std::stod(cell); }

std::map<std::string, OgleEntry> ogle_catalogue() {
  std::map<std::string, OgleEntry> out;
  std::istringstream in(test::read_text(test::reference_file("lmc_fundamental_cepheids.csv")));
  for (std::string line; std::getline(in, line);) {
    std::vector<std::string> f;
    std::istringstream cells(line);
    for (std::string c; std::getline(cells, c, ',');) f.push_back(c);
    if (f.size() != 11) continue;
    out[f[0]] = {number(f[1]), number(f[2]), number(f[3]), number(f[4]), number(f[5]),
                 number(f[6]), number(f[7]), number(f[8]), number(f[9]), number(f[10])};
  }
  return out;
}

// The distance between two angles (rad), in [0, pi].
double angle_between(double a, double b) {
  const double d = std::remainder(a - b, 2 * std::numbers::pi);
  return std::abs(d);
}

const BandResult* band_of(const StarResult& s, const std::string& band) {
  for (const auto& b : s.bands)
    if (b.band == band) return &b;
  return nullptr;
}

// docs/tutorial.md's survey config, reading the test data's phot/<band>/<star>.dat.
LightCurveResult run_ogle_files(const test::TempDir& dir) {
  const std::filesystem::path data = test::source_file("tests/data/ogle4_lmc_cepheids");
  std::filesystem::copy(data, dir.file("phot"), std::filesystem::copy_options::recursive);
  test::write_text(dir.file("lc.toml"),
                   "bands_file = \"" + test::source_file("config/bands.toml") +
                       "\"\n[source]\npath = \"" + dir.file("phot/*/*.dat") +
                       "\"\nname_pattern = \"{band}/{star}.dat\"\nheader = false\n"
                       "delimiter = \"whitespace\"\ncolumn_names = [\"time\", \"mag\", "
                       "\"mag_err\"]\ntime_offset_d = 2450000\ntime_scale = \"hjd\"\n"
                       "[columns]\ntime = \"time\"\nmag = \"mag\"\nmag_err = \"mag_err\"\n"
                       "[search]\nmin_period = 1.0\nmax_period = 100.0\n"
                       "[output]\npath = \"" +
                       dir.file("out/lightcurves.fits") + "\"\n");
  return run_lightcurves(lightcurve_options_from_file(dir.file("lc.toml")));
}

TEST(RealLightCurves, OgleIvFilesGiveTheCataloguePeriodsMeansAndFourierParameters) {
  test::TempDir dir;
  const LightCurveResult r = run_ogle_files(dir);
  const auto catalogue = ogle_catalogue();
  ASSERT_EQ(r.stars.size(), 4U);
  for (const StarResult& s : r.stars) {
    ASSERT_TRUE(catalogue.count(s.id)) << s.id;
    if (s.id == "OGLE-LMC-CEP-0227") continue;  // the eclipsing binary: next test
    const OgleEntry& c = catalogue.at(s.id);
    SCOPED_TRACE(s.id);
    EXPECT_TRUE(s.usable);
    EXPECT_EQ(s.flags, 0U);
    // About 430-680 I epochs over 6 years (OGLE-IV alone; the catalogue's periods also use
    // OGLE-II and -III, over 17 years): within 3 of our errors (7-12 micro-days) of it.
    EXPECT_NEAR(s.period_d, c.period, 3 * s.period_err_d);
    EXPECT_LT(s.period_err_d, 2e-5);
    const BandResult* i = band_of(s, "I");
    const BandResult* v = band_of(s, "V");
    ASSERT_TRUE(i && v);
    // Intensity means: I to 0.003 mag (the catalogue's are given to 0.001); V from 32-154
    // epochs to 0.015.
    EXPECT_NEAR(i->measures.intensity_mean, c.mean_i, 0.003);
    EXPECT_NEAR(v->measures.intensity_mean, c.mean_v, 0.015);
    EXPECT_NEAR(i->measures.amplitude, c.amplitude_i, 0.015);
    EXPECT_NEAR(i->measures.r21, c.r21, 0.01);
    EXPECT_NEAR(i->measures.r31, c.r31, 0.01);
    // OGLE's phases are of the cosine series; ours of the sine series: phi21 + pi/2, phi31 +
    // pi (docs/method.md, light curves, step 4).
    EXPECT_LT(angle_between(i->measures.phi21 + std::numbers::pi / 2, c.phi21), 0.05);
    EXPECT_LT(angle_between(i->measures.phi31 + std::numbers::pi, c.phi31), 0.1);
    // The epoch of maximum I light, in phase: OGLE's is HJD - 2450000 in the same time scale.
    const double cycles = (i->measures.epoch_of_max - 2450000.0 - c.epoch_max) / c.period;
    EXPECT_LT(std::abs(cycles - std::round(cycles)), 0.01) << cycles;
  }
}

TEST(RealLightCurves, TheCepheidInAnEclipsingBinaryIsFlaggedNotTrusted) {
  // OGLE-LMC-CEP-0227 is a Cepheid in a 310-day eclipsing binary (Pietrzynski et al. 2010,
  // Nature 468, 542; period from memory): about 5% of its I epochs fall in eclipse, up to
  // 0.6 mag below the median, and they carry more power than the 3.797-day pulsation
  // (astropy's LombScargle on the I file alone peaks at 62 days too). The stage must not hand
  // on its peak as if clean: it is flagged.
  test::TempDir dir;
  const LightCurveResult r = run_ogle_files(dir);
  for (const StarResult& s : r.stars) {
    if (s.id != "OGLE-LMC-CEP-0227") continue;
    EXPECT_GT(std::abs(s.period_d - ogle_catalogue().at(s.id).period), 1.0);
    EXPECT_NE(s.flags, 0U) << "a period far from the pulsation's, unflagged";
    return;
  }
  FAIL() << "OGLE-LMC-CEP-0227 not in the result";
}

// astropy's reading of the archive file: per band, the epochs with neither rejection flag, as
// "band n sum(time) sum(mag) max|mag - (ZP - 2.5 log10 flux)|", the zero points passed in.
constexpr const char* kReadArchiveFile = R"py(
import sys, warnings, numpy as np
from astropy.io.votable import parse
warnings.simplefilter("ignore")
t = parse(sys.argv[1]).get_first_table().to_table()
zp = dict(G=float(sys.argv[2]), BP=float(sys.argv[3]), RP=float(sys.argv[4]))
for b in ("G", "BP", "RP"):
    s = t[t["band"] == b]
    flagged = np.asarray(s["rejected_by_photometry"].filled(True)) | \
        np.asarray(s["rejected_by_variability"].filled(True))
    ok = ~flagged
    mag = np.asarray(s["mag"].filled(np.nan))[ok]
    flux = np.asarray(s["flux"].filled(np.nan))[ok]
    time = np.asarray(s["time"].filled(np.nan))[ok]
    print(b, ok.sum(), repr(time.sum()), repr(mag.sum()),
          repr(np.max(np.abs(mag - (zp[b] - 2.5 * np.log10(flux))))))
)py";

TEST(RealLightCurves, GaiaDr3EpochPhotometryAsTheArchiveSendsIt) {
  const std::string file = test::source_file(
      "tests/data/gaia_dr3_epoch_photometry/EPOCH_PHOTOMETRY-Gaia DR3 4057091150787104896.xml");
  const auto py = test::run_python(
      kReadArchiveFile, {file, std::to_string(kGaiaZeroPointG), std::to_string(kGaiaZeroPointBp),
                         std::to_string(kGaiaZeroPointRp)});
  ASSERT_EQ(py.exit_code, 0) << py.output;
  struct Expected {
    int epochs = 0;
    double time_sum = 0, mag_sum = 0, zero_point_misfit = 0;
  };
  std::map<std::string, Expected> astropy;
  std::istringstream lines(py.output);
  for (std::string band; lines >> band;) {
    Expected e;
    lines >> e.epochs >> e.time_sum >> e.mag_sum >> e.zero_point_misfit;
    astropy[band] = e;
  }
  ASSERT_EQ(astropy.size(), 3U) << py.output;
  // The zero points (gaia_epoch.hpp, recalled from memory) give the archive's own magnitudes
  // from its fluxes to 1e-4 mag: the archive used the same zero points to a few 1e-5.
  for (const auto& [band, e] : astropy) EXPECT_LT(e.zero_point_misfit, 1e-4) << band;

  // The stage's reading, from a glob as a folder of downloads is named.
  test::TempDir dir;
  std::filesystem::copy(file, dir.file(std::filesystem::path(file).filename().string()));
  test::write_text(dir.file("lc.toml"), "bands_file = \"" + test::source_file("config/bands.toml") +
                                            "\"\n[source]\npath = \"" +
                                            dir.file("EPOCH_PHOTOMETRY-*.xml") +
                                            "\"\nlayout = \"gaia_epoch\"\n[output]\npath = \"" +
                                            dir.file("out/lc.fits") + "\"\n");
  const LightCurveResult r = run_lightcurves(lightcurve_options_from_file(dir.file("lc.toml")));
  ASSERT_EQ(r.series.size(), 1U);
  // Every band's kept epochs are astropy's, with times BJD(TCB) - 2455197.5 (the file's
  // TIMESYS timeorigin) and the archive's magnitudes.
  std::map<std::string, Expected> ours;
  const StarSeries& s = r.series[0];
  for (std::size_t b = 0; b < s.bands.size(); ++b) {
    Expected& e = ours[s.bands[b]];
    for (std::size_t k = 0; k < s.series[b].size(); ++k) {
      ++e.epochs;
      e.time_sum += s.series[b].t[k] - kGaiaTimeOriginBjd;
      e.mag_sum += s.series[b].y[k];
    }
  }
  for (const auto& [band, e] : astropy) {
    SCOPED_TRACE(band);
    EXPECT_EQ(ours[band].epochs, e.epochs);
    EXPECT_NEAR(ours[band].time_sum, e.time_sum, 1e-6 * e.epochs);
    EXPECT_NEAR(ours[band].mag_sum, e.mag_sum, 1e-9 * e.epochs);
  }
  // 42 transits per band in the file; those dropped are counted by reason.
  std::int64_t flagged = 0;
  for (const auto& d : r.dropped) {
    EXPECT_EQ(d.flagged + astropy.at(d.band).epochs, 42) << d.band;
    flagged += d.flagged;
  }
  EXPECT_EQ(flagged,
            126 - astropy.at("G").epochs - astropy.at("BP").epochs - astropy.at("RP").epochs);
}

}  // namespace
}  // namespace rungcal
