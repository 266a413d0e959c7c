// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include "rungcal/core/config.hpp"
#include "rungcal/core/enum_table.hpp"
#include "rungcal/core/provenance.hpp"
#include "rungcal/core/stage_files.hpp"
#include "rungcal/lightcurve/fourier.hpp"
#include "rungcal/lightcurve/gaia_epoch.hpp"
#include "rungcal/lightcurve/per_star_files.hpp"
#include "rungcal/lightcurve/periodogram.hpp"
#include "rungcal/photometry/bands.hpp"
#include "rungcal/table/star_table.hpp"
#include "rungcal/table/table_source.hpp"

namespace rungcal {

// The time scale of a time series' times; kept with every epoch the stage writes.
enum class TimeScale { kBjdTdb, kHjd, kJd, kMjd, kBjdTcb };
inline constexpr EnumTable<TimeScale, 5> kTimeScaleNames{{{
    {TimeScale::kBjdTdb, "bjd_tdb"},
    {TimeScale::kBjdTcb, "bjd_tcb"},  // Gaia's epochs (gaia_epoch.hpp)
    {TimeScale::kHjd, "hjd"},
    {TimeScale::kJd, "jd"},
    {TimeScale::kMjd, "mjd"},
}}};

// How the time series is laid out: one long table (or one file per star, see PerStarFiles),
// or Gaia DR3 epoch photometry with the epochs in array columns (gaia_epoch.hpp).
enum class SourceLayout { kTable, kGaiaEpoch };
inline constexpr EnumTable<SourceLayout, 2> kSourceLayoutNames{{{
    {SourceLayout::kTable, "table"},
    {SourceLayout::kGaiaEpoch, "gaia_epoch"},
}}};

struct LightCurveOptions {
  TableSourceSpec source;  // the time series: FITS or delimited text ([source])
  PerStarFiles files;      // or one file per star: source.path is then a glob
  SourceLayout layout =
      SourceLayout::kTable;  // or Gaia epoch photometry (source.path: file or glob)
  std::vector<std::string> gaia_bands = {"G", "BP", "RP"};  // gaia_epoch: the bands expanded
  std::string star_column = "star";           // star id (as in the calibrator catalog)
  std::string time_column = "time";           // time of each epoch, days
  std::string band_column = "band";           // band name (as in the band table)
  std::string mag_column = "mag";             // magnitude
  std::string err_column = "mag_err";         // magnitude error (> 0)
  TimeScale time_scale = TimeScale::kBjdTdb;  // the scale of time_column
  std::string bands_file;                     // band table: every band must be in it
  double min_period_d = 1.0;                  // period search range, days
  double max_period_d = 100.0;
  double oversampling = 5.0;      // grid points per periodogram peak width 1/T
  int search_harmonics = 1;       // Fourier terms of the periodogram (1: Lomb-Scargle)
  int max_order = 6;              // highest Fourier order of the light-curve model (BIC picks)
  int min_points = 12;            // a band with fewer epochs is left out of the star's fit
  int min_dof = 3;                // residual degrees of freedom a band's model must leave
  double max_false_alarm = 1e-3;  // a period with a larger false-alarm probability is not usable
  double max_phase_gap = 0.15;    // largest phase gap (cycles) before the flag phase_gap
  double competing_peak_ratio = 0.8;           // a second peak this close in power is flagged
  std::vector<std::string> periodogram_stars;  // stars whose periodogram is written ("*": all)
  bool write_points = true;  // write each epoch with its phase and model (HDU POINTS)
  int threads = 0;           // worker threads over stars; 0 = every core
  std::string output_path = "out/lightcurves.fits";  // the summary product (FITS)
  std::string summary_csv_path;  // person-readable summary; "" = beside the FITS as .csv
  std::string config_file;       // for messages and provenance
  std::string config_sha256;

  // "" when usable, else "field: rule".
  std::string check() const;
};

// Reads a light-curve config ([source], [columns], [search], [model], [flags], [output]);
// unknown keys stop with rule "unknown_config_key".
LightCurveOptions lightcurve_options_from_file(const std::string& path);

// What the stage reads: the time-series table, or every per-star file its glob matches (a
// file added, removed or changed is seen), and the band table; what it writes: the FITS
// product and the summary CSV.
StageFiles declared_files(const LightCurveOptions& options);
// The summary CSV: summary_csv_path, or the FITS product's name with .csv.
std::string lightcurve_summary_csv_path(const LightCurveOptions& options);

// A quality flag of a star's period, in the order of its bit in the summary's flags column.
enum class PeriodFlag : std::uint32_t {
  kTooFewPoints = 1u << 0,    // no band has enough epochs: no period
  kNotSignificant = 1u << 1,  // false-alarm probability above max_false_alarm
  kAtSearchEdge = 1u << 2,    // best peak at the end of the searched period range
  kAlias = 1u << 3,           // a competing peak sits at a daily or yearly alias
  kCompetingPeak = 1u << 4,   // a competing peak elsewhere
  kPhaseGap = 1u << 5,        // the phased curve has a gap wider than max_phase_gap
  kShortBaseline = 1u << 6,   // fewer than three cycles observed
  kNotConverged = 1u << 7,    // the non-linear refinement did not converge
  kRefinementJump = 1u << 8,  // refinement moved the frequency more than one peak width
};
inline constexpr EnumTable<PeriodFlag, 9> kPeriodFlagNames{{{
    {PeriodFlag::kTooFewPoints, "too_few_points"},
    {PeriodFlag::kNotSignificant, "not_significant"},
    {PeriodFlag::kAtSearchEdge, "at_search_edge"},
    {PeriodFlag::kAlias, "alias"},
    {PeriodFlag::kCompetingPeak, "competing_peak"},
    {PeriodFlag::kPhaseGap, "phase_gap"},
    {PeriodFlag::kShortBaseline, "short_baseline"},
    {PeriodFlag::kNotConverged, "not_converged"},
    {PeriodFlag::kRefinementJump, "refinement_jump"},
}}};
// Flags that make a period unusable for the calibration.
inline constexpr std::uint32_t kBlockingPeriodFlags =
    static_cast<std::uint32_t>(PeriodFlag::kTooFewPoints) |
    static_cast<std::uint32_t>(PeriodFlag::kNotSignificant) |
    static_cast<std::uint32_t>(PeriodFlag::kAtSearchEdge) |
    static_cast<std::uint32_t>(PeriodFlag::kNotConverged);
// "alias,phase_gap" for a flag mask ("" when none).
std::string period_flag_names(std::uint32_t flags);

// One star's epochs, per band in the band order the star was first seen with.
struct StarSeries {
  std::string id;
  std::vector<std::string> bands;
  std::vector<TimeSeries> series;
};

// What the stage found for one band of one star.
struct BandResult {
  std::string band;
  FourierCurve curve;
  CurveMeasures measures;
};

struct StarResult {
  std::string id;
  std::size_t points = 0;
  double baseline_d = 0;
  double frequency = 0, frequency_err = 0;
  double period_d = 0, period_err_d = 0;
  double power = 0;        // periodogram power at the best peak
  double false_alarm = 1;  // Baluev FAP (band with most epochs, single-harmonic power)
  double second_peak_power = 0;
  double second_peak_period_d = 0;
  double t_ref = 0;
  double max_phase_gap = 0;
  std::uint32_t flags = 0;
  bool usable = false;
  int iterations = 0;
  std::vector<BandResult> bands;
  std::vector<std::string> skipped_bands;  // too few epochs
  std::vector<double> periodogram;         // kept only for the stars asked for
  FrequencyGrid grid;
};

// Period search, light-curve model and measures for one star (no I/O).
StarResult analyse_star(const StarSeries& star, const LightCurveOptions& options,
                        bool keep_periodogram);

// A star's result as bytes for the other ranks of an MPI run, and back (bit for bit).
std::string encode_star_result(const StarResult& star);
StarResult decode_star_result(const std::string& bytes);

// One refused input row.
struct ObservationReject {
  std::int64_t source_row = 0;
  std::string star;
  std::string rule;
  std::string column;
  std::string message;
};

struct LightCurveResult {
  std::vector<StarResult> stars;  // in order of first appearance in the input
  std::vector<ObservationReject> rejected;
  std::vector<std::string> bands;  // every band seen, in order of first appearance
  // gaia_epoch: epochs dropped per source and band (flags, missing values); SUMMARY
  // dropped_<band>.
  std::vector<GaiaDroppedEpochs> dropped;
  std::size_t rows_read = 0;
  Provenance provenance;
  std::vector<StarSeries> series;  // the accepted epochs (for the POINTS table)

  StarTable summary_table(TimeScale scale) const;  // HDU SUMMARY: one row per star
  StarTable fourier_table() const;                 // HDU FOURIER: coefficients per star and band
  StarTable points_table() const;                  // HDU POINTS: epochs, phases, model
  StarTable periodogram_table() const;             // HDU PERIODOGRAM: kept periodograms
  StarTable rejects_table() const;                 // HDU REJECTS
};

// Groups the observations by star and band, refusing bad rows with their reasons.
std::vector<StarSeries> group_observations(const SourceTable& in, const LightCurveOptions& options,
                                           const BandTable& bands,
                                           std::vector<ObservationReject>& rejected,
                                           std::vector<std::string>& band_order);

// Reads, analyses every star in parallel (progress on a terminal); writes nothing. Under
// MPI the stars are split across ranks and every rank returns the whole result.
LightCurveResult run_lightcurves(const LightCurveOptions& options);
// Writes the FITS product (SUMMARY, FOURIER, POINTS, PERIODOGRAM, REJECTS) and the summary
// CSV; under MPI only rank 0 writes.
void write_lightcurve_products(const LightCurveResult& result, const LightCurveOptions& options);

}  // namespace rungcal
