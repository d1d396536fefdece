// Reading velocity and transit-time files: delimiters, headers, instrument labels, units,
// full-precision times, several files, and the three real published files read as they
// are (copied into tests/data/real/, sources in its README). Counts, sums and
// exact reduced times are checked against an independent reader: numpy / Python's
// decimal module through /usr/bin/python3.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>

#include "apsides/data.h"
#include "apsides/ephemeris.h"
#include "apsides/project.h"
#include "apsides/error.h"
#include "test_support.h"

namespace {
using apsides::VelocityFileOptions;
using apsides::VelocityUnit;
namespace t = apsides::test;

nlohmann::json python_json(const std::string& code) {
  const auto r = t::run_python(code);
  REQUIRE_MESSAGE(r.status == 0, r.output);
  return nlohmann::json::parse(r.output);
}

}  // namespace

TEST_SUITE("data") {

TEST_CASE("comma, tab and whitespace separated files read to the same data") {
  const std::string d = t::temp_dir("data/delimiters");
  const auto a = apsides::load_velocities({t::write_text(d, "a.csv", "2459000.5,1.5,0.5\n2459001.25,-2.5,0.75\n")}, {{"x"}});
  const auto b = apsides::load_velocities({t::write_text(d, "b.tsv", "2459000.5\t1.5\t0.5\n2459001.25\t-2.5\t0.75\n")}, {{"x"}});
  const auto c = apsides::load_velocities({t::write_text(d, "c.txt", "  2459000.5   1.5 0.5\n2459001.25 -2.5\t 0.75  \n")}, {{"x"}});
  for (const auto* v : {&b, &c}) {
    CHECK(v->time_days == a.time_days);
    CHECK(v->velocity_m_s == a.velocity_m_s);
    CHECK(v->uncertainty_m_s == a.uncertainty_m_s);
  }
  CHECK(a.size() == 2);
  CHECK(a.velocity_m_s[1] == -2.5);
}

TEST_CASE("a first row of names is a header and comments are skipped anywhere") {
  const std::string d = t::temp_dir("data/header");
  const auto v = apsides::load_velocities(
      {t::write_text(d, "h.csv", "# my star\ntime, rv, err   # units m/s\n\n2459000.5, 1.0, 0.5 # first\n# gap\n2459002.5, 2.0, 0.5\n")},
      {{}});
  REQUIRE(v.size() == 2);
  CHECK(v.origin[0].ends_with("h.csv:4"));
  CHECK(v.origin[1].ends_with("h.csv:6"));
  CHECK(v.velocity_m_s[1] == 2.0);
}

TEST_CASE("an instrument column labels rows; a per-file label or the file stem labels the rest") {
  const std::string d = t::temp_dir("data/labels");
  const std::string col = t::write_text(d, "mixed.csv", "2459000.5,1,1,north\n2459001.5,2,1,south\n2459002.5,3,1,north\n");
  const std::string plain = t::write_text(d, "east_rv.csv", "2459003.5,4,1\n2459004.5,5,1\n");
  auto v = apsides::load_velocities({col, plain}, {{}, {}});
  CHECK(v.instrument_names == std::vector<std::string>{"north", "south", "east_rv"});
  CHECK(v.count(0) == 2);
  CHECK(v.count(1) == 1);
  CHECK(v.count(2) == 2);
  v = apsides::load_velocities({col, plain}, {{}, {"west"}});
  CHECK(v.instrument_names.back() == "west");
  const auto north = v.subset(0);
  CHECK(north.size() == 2);
  CHECK(north.instrument_names == std::vector<std::string>{"north"});
  CHECK(north.velocity_m_s == std::vector<double>{1, 3});
}

TEST_CASE("velocities declared in km/s are converted to m/s") {
  const std::string d = t::temp_dir("data/kms");
  const std::string p = t::write_text(d, "k.csv", "2459000.5,46.30911,0.00255\n2459001.5,-33.258,0.009\n");
  const auto v = apsides::load_velocities({p}, {{"", VelocityUnit::kKilometersPerSecond}});
  CHECK(v.velocity_m_s[0] == doctest::Approx(46309.11).epsilon(1e-14));
  CHECK(v.uncertainty_m_s[0] == doctest::Approx(2.55).epsilon(1e-14));
  CHECK(v.velocity_m_s[1] == doctest::Approx(-33258.0).epsilon(1e-14));
  CHECK(v.warnings.empty());
  CHECK(apsides::parse_velocity_unit("km/s", "x") == VelocityUnit::kKilometersPerSecond);
  CHECK(apsides::to_string(VelocityUnit::kMetersPerSecond) == "m/s");
}

TEST_CASE("full BJD times are kept exactly: reduced times agree with decimal arithmetic to 1e-9 d") {
  const std::string d = t::temp_dir("data/precision");
  const std::string text =
      "2459000.123456789,1,1\n2459123.987654321,1,1\n2458876.000000001,1,1\n2459417.314159265,1,1\n";
  const std::string p = t::write_text(d, "p.csv", text);
  const auto v = apsides::load_velocities({p}, {{}});
  CHECK(v.reference_epoch_bjd == std::floor(v.reference_epoch_bjd));
  // Independent reference: Python's exact decimal arithmetic on the same text.
  const auto ref = python_json(
      "import json, decimal\n"
      "ts = sorted(decimal.Decimal(l.split(',')[0]) for l in open('" + p + "') if l.strip())\n"
      "r = decimal.Decimal(" + std::to_string(static_cast<long long>(v.reference_epoch_bjd)) + ")\n"
      "print(json.dumps([str(t - r) for t in ts]))\n");
  REQUIRE(ref.size() == v.size());
  for (std::size_t i = 0; i < v.size(); ++i) {
    CHECK(std::fabs(v.time_days[i] - std::stod(ref[i].get<std::string>())) < 1e-9);
  }
  CHECK(v.baseline_days() == doctest::Approx(2459417.314159265 - 2458876.000000001).epsilon(1e-12));
}

TEST_CASE("several files combine: time-sorted, instruments in order of first appearance, origins kept") {
  const std::string d = t::temp_dir("data/combine");
  const std::string a = t::write_text(d, "a.csv", "2459010.5,10,1\n2459000.5,0,1\n");
  const std::string b = t::write_text(d, "b.csv", "2459005.5 5 2 B\n2459000.5 7 2 B\n");  // same time as a: other instrument
  const auto v = apsides::load_velocities({a, b}, {{"A"}, {}});
  REQUIRE(v.size() == 4);
  CHECK(v.instrument_names == std::vector<std::string>{"A", "B"});
  CHECK(v.reference_epoch_bjd == 2459005.0);
  CHECK(v.time_days == std::vector<double>{-4.5, -4.5, 0.5, 5.5});
  CHECK(v.velocity_m_s == std::vector<double>{0, 7, 5, 10});
  CHECK(v.instrument == std::vector<int>{0, 1, 1, 0});
  CHECK(v.origin[0] == a + ":2");
  CHECK(v.origin[3] == a + ":1");
}

TEST_CASE("extra numeric columns of a velocity file are kept by name as indicators") {
  const std::string d = t::temp_dir("data/extra_columns");
  const std::string p = t::write_text(d, "x.csv", "bjd,rv,erv,fwhm,bis,inst\n2459000.5,1,1,7.1,-20,H\n2459001.5,2,1,7.2,-21,H\n");
  const auto f = apsides::read_velocity_file(p, {});
  CHECK(f.ignored_columns.empty());
  CHECK(f.columns == std::vector<std::string>{"bjd", "rv", "erv", "fwhm", "bis", "inst"});
  CHECK(f.instrument == std::vector<std::string>{"H", "H"});
  REQUIRE(f.indicators.size() == 2);
  CHECK(f.indicators[0].name == "fwhm");
  CHECK(f.indicators[0].value == std::vector<double>{7.1, 7.2});
  CHECK_FALSE(f.indicators[0].has_uncertainty());
  CHECK(f.indicators[1].value == std::vector<double>{-20, -21});
  CHECK(f.warnings.empty());
  // `indicators` keeps only the named ones; the others are listed as not kept.
  VelocityFileOptions only_bis;
  only_bis.indicators = std::vector<std::string>{"bis"};
  const auto g = apsides::read_velocity_file(p, only_bis);
  REQUIRE(g.indicators.size() == 1);
  CHECK(g.indicators[0].name == "bis");
  CHECK(g.ignored_columns == std::vector<std::string>{"fwhm"});
}

TEST_CASE("an indicator's uncertainty column is found by name; empty and nan cells are missing values") {
  const std::string d = t::temp_dir("data/indicator_errors");
  // Each spelling of the rule: <name>_err, <name>_error, e_<name>, err_<name>.
  const std::string p = t::write_text(d, "i.csv",
                                      "t,v,e,sindex,sindex_err,ha,ha_error,fwhm,e_fwhm,bis,err_bis,rhk\n"
                                      "2459000.5,1,1,0.51,0.01,1.1,0.1,7.1,0.02,-20,2,-4.9\n"
                                      "2459001.5,2,1,,,1.2,0.1,nan,0.02,-21,2,\n"
                                      "2459002.5,3,1,0.53,0.03,NaN,,7.3,0.02,-22,2,-4.8\n");
  const auto f = apsides::read_velocity_file(p, {});
  REQUIRE(f.indicators.size() == 5);
  const std::vector<std::string> names = {"sindex", "ha", "fwhm", "bis", "rhk"};
  for (std::size_t k = 0; k < 5; ++k) CHECK(f.indicators[k].name == names[k]);
  for (std::size_t k = 0; k < 4; ++k) CHECK(f.indicators[k].has_uncertainty());
  CHECK_FALSE(f.indicators[4].has_uncertainty());
  CHECK(std::isnan(f.indicators[0].value[1]));
  CHECK(std::isnan(f.indicators[0].uncertainty[1]));
  CHECK(f.indicators[0].uncertainty[2] == 0.03);
  CHECK(std::isnan(f.indicators[1].value[2]));
  CHECK(std::isnan(f.indicators[2].value[1]));
  CHECK(f.indicators[2].uncertainty[1] == 0.02);  // an error without its value is kept as read
  CHECK(f.indicators[3].uncertainty == std::vector<double>{2, 2, 2});
  CHECK(std::isnan(f.indicators[4].value[1]));
  CHECK(f.indicators[0].count_present() == 2);
  CHECK(f.indicators[3].count_present() == 3);
  CHECK(apsides::indicator_error_column("bis", f.columns) == "err_bis");
  CHECK(apsides::indicator_error_column("rhk", f.columns).empty());
}

TEST_CASE("indicators merge across files by name, follow the sorting, and are reached per instrument") {
  const std::string d = t::temp_dir("data/indicator_merge");
  const std::string a = t::write_text(d, "a.csv", "t,v,e,inst,fwhm,fwhm_err,sval\n"
                                                  "2459003.5,3,1,north,7.3,0.1,0.3\n2459001.5,1,1,north,7.1,0.1,\n");
  const std::string b = t::write_text(d, "b.csv", "t,v,e,bis\n2459002.5,2,1,-5\n2459000.5,0,1,-4\n");
  const auto v = apsides::load_velocities({a, b}, {{}, {"south"}});
  REQUIRE(v.size() == 4);
  CHECK(v.indicator_names() == std::vector<std::string>{"fwhm", "sval", "bis"});
  CHECK(v.velocity_m_s == std::vector<double>{0, 1, 2, 3});
  const auto* fwhm = v.indicator("fwhm");
  REQUIRE(fwhm != nullptr);
  CHECK(std::isnan(fwhm->value[0]));
  CHECK(fwhm->value[1] == 7.1);
  CHECK(std::isnan(fwhm->value[2]));
  CHECK(fwhm->value[3] == 7.3);
  REQUIRE(fwhm->has_uncertainty());
  CHECK(fwhm->uncertainty[3] == 0.1);
  CHECK(std::isnan(fwhm->uncertainty[0]));
  const auto* bis = v.indicator("bis");
  REQUIRE(bis != nullptr);
  CHECK_FALSE(bis->has_uncertainty());
  CHECK(bis->value[0] == -4);
  CHECK(bis->value[2] == -5);
  CHECK(std::isnan(bis->value[1]));
  CHECK(v.indicator("nope") == nullptr);
  // Per instrument: the subset carries its indicator values; indicator_points drops missing ones.
  const auto north = v.subset(0);
  REQUIRE(north.indicators.size() == 3);
  CHECK(north.indicator("fwhm")->value == std::vector<double>{7.1, 7.3});
  CHECK(north.indicator("fwhm")->uncertainty == std::vector<double>{0.1, 0.1});
  const auto sval = v.indicator_points("sval");
  REQUIRE(sval.size() == 1);
  CHECK(sval.value[0] == 0.3);
  CHECK(sval.point[0] == 3);
  CHECK(sval.time_days[0] == v.time_days[3]);
  CHECK(std::isnan(sval.uncertainty[0]));
  const auto bis_south = v.indicator_points("bis", 1);
  CHECK(bis_south.value == std::vector<double>{-4, -5});
  CHECK(bis_south.instrument == std::vector<int>{1, 1});
  CHECK(v.indicator_points("bis", 0).size() == 0);
  CHECK_THROWS_AS(v.indicator_points("nope"), apsides::InputError);
}

TEST_CASE("repeated (time, instrument) pairs: kept with one warning, averaged, or refused") {
  const std::string d = t::temp_dir("data/repeats");
  const std::string text = "t,v,e,fwhm,fwhm_err\n2459000.5,1,1,7.0,0.1\n2459001.5,5,1,7.5,0.1\n"
                           "2459000.5,3,2,7.2,0.2\n2459002.5,4,1,,\n";
  const std::string p = t::write_text(d, "r.csv", text);
  const auto kept = apsides::load_velocities({p}, {{}});
  CHECK(kept.size() == 4);
  REQUIRE(kept.warnings.size() == 1);
  CHECK(kept.warnings[0] == p + ": 1 repeated (time, instrument) pair, every point kept: lines 2 and 4 (time "
                                "2459000.5, 'r') (repeats = \"average\" merges them, \"error\" refuses them)");
  VelocityFileOptions avg;
  avg.repeats = apsides::RepeatPolicy::kAverage;
  const auto merged = apsides::load_velocities({p}, {avg});
  REQUIRE(merged.size() == 3);
  // Inverse-variance weighted mean: w = 1, 1/4: v = (1 + 3/4) / (5/4) = 1.4, sigma = (5/4)^-1/2.
  CHECK(merged.velocity_m_s[0] == doctest::Approx(1.4).epsilon(1e-15));
  CHECK(merged.uncertainty_m_s[0] == doctest::Approx(1.0 / std::sqrt(1.25)).epsilon(1e-15));
  // fwhm: w = 100, 25: (700 + 180) / 125 = 7.04, sigma = 125^-1/2.
  CHECK(merged.indicator("fwhm")->value[0] == doctest::Approx(7.04).epsilon(1e-15));
  CHECK(merged.indicator("fwhm")->uncertainty[0] == doctest::Approx(1.0 / std::sqrt(125.0)).epsilon(1e-15));
  CHECK(merged.origin[0] == p + ":2+4");
  CHECK(merged.sources() == p);
  REQUIRE(merged.warnings.size() == 1);
  CHECK(merged.warnings[0] == p + ": 1 repeated (time, instrument) pair replaced by their inverse-variance weighted "
                                  "mean (repeats = \"average\"): lines 2 and 4 (time 2459000.5, 'r')");
  VelocityFileOptions err;
  err.repeats = apsides::RepeatPolicy::kError;
  CHECK_THROWS_AS(apsides::load_velocities({p}, {err}), apsides::InputError);
  // The same time for two instruments is no repeat.
  const std::string q = t::write_text(d, "q.csv", "2459000.5,1,1,A\n2459000.5,2,1,B\n");
  CHECK(apsides::load_velocities({q}, {err}).size() == 2);
}

TEST_CASE("a declared time offset is added exactly: MJD and BJD - 2450000 against decimal arithmetic") {
  const std::string d = t::temp_dir("data/time_offset");
  const std::string text = "59000.123456789,1,1\n59001.987654321,2,1\n";
  const std::string p = t::write_text(d, "mjd.csv", text);
  VelocityFileOptions mjd;
  mjd.time_offset_days = 2400000.5;
  const auto v = apsides::load_velocities({p}, {mjd});
  const auto ref = python_json(
      "import json, decimal\n"
      "ts = [decimal.Decimal(l.split(',')[0]) + decimal.Decimal('2400000.5') for l in open('" + p + "') if l.strip()]\n"
      "r = decimal.Decimal(" + std::to_string(static_cast<long long>(v.reference_epoch_bjd)) + ")\n"
      "print(json.dumps({'t': [str(t - r) for t in ts], 'ref': int((min(ts) + max(ts)) // 2)}))\n");
  CHECK(v.reference_epoch_bjd == ref["ref"].get<double>());
  for (std::size_t i = 0; i < v.size(); ++i) {
    CHECK(std::fabs(v.time_days[i] - std::stod(ref["t"][i].get<std::string>())) < 1e-9);
  }
  // time_offset = 0: times on a scale of their own are kept as given.
  const std::string rel = t::write_text(d, "rel.csv", "0,1,1\n10.5,2,1\n100,3,1\n");
  VelocityFileOptions as_given;
  as_given.time_offset_days = 0.0;
  const auto r = apsides::load_velocities({rel}, {as_given});
  CHECK(r.reference_epoch_bjd == 50.0);
  CHECK(r.time_days == std::vector<double>{-50, -39.5, 50});
}

TEST_CASE("51 Peg (Birkby et al. 2017): 639 rows, six instruments, counts and sums as numpy reads them") {
  const std::string p = t::real_data("51peg_rv_birkby2017.txt");
  const auto v = apsides::load_velocities({p}, {{}});
  CHECK(v.size() == 639);
  CHECK(v.n_instruments() == 6);
  CHECK(v.warnings.empty());
  const auto ref = python_json(
      "import json, numpy as np, collections\n"
      "t, v, e = np.loadtxt('" + p + "', usecols=(0, 1, 2), unpack=True)\n"
      "lab = np.loadtxt('" + p + "', usecols=(3,), dtype=str)\n"
      "print(json.dumps({'counts': dict(collections.Counter(lab.tolist())), 'sum_v': float(v.sum()),"
      " 'sum_e': float(e.sum()), 'tmin': float(t.min()), 'tmax': float(t.max())}))\n");
  for (std::size_t i = 0; i < v.n_instruments(); ++i) {
    CAPTURE(v.instrument_names[i]);
    CHECK(v.count(static_cast<int>(i)) == ref["counts"][v.instrument_names[i]].get<std::size_t>());
  }
  double sv = 0, se = 0;
  for (std::size_t i = 0; i < v.size(); ++i) {
    sv += v.velocity_m_s[i];
    se += v.uncertainty_m_s[i];
  }
  CHECK(sv == doctest::Approx(ref["sum_v"].get<double>()).epsilon(1e-12));
  CHECK(se == doctest::Approx(ref["sum_e"].get<double>()).epsilon(1e-12));
  CHECK(v.time_days.front() + v.reference_epoch_bjd == doctest::Approx(ref["tmin"].get<double>()).epsilon(1e-15));
  CHECK(v.baseline_days() == doctest::Approx(ref["tmax"].get<double>() - ref["tmin"].get<double>()).epsilon(1e-12));
  // ELODIE gives absolute velocities: its systemic velocity is about -33 km/s (README of
  // tests/data/real/README.md); the other instruments' zero points are their own.
  const auto elodie = v.subset(static_cast<int>(std::find(v.instrument_names.begin(), v.instrument_names.end(), "ELODIE") -
                                                v.instrument_names.begin()));
  CHECK(elodie.velocity_m_s.front() == doctest::Approx(-33258.0));
}

TEST_CASE("HD 20868 (Moutou et al. 2009): 48 rows under a header, km/s when declared") {
  const std::string p = t::real_data("hd20868_rv_moutou2009.txt");
  const auto kms = apsides::load_velocities({p}, {{"HARPS", VelocityUnit::kKilometersPerSecond}});
  CHECK(kms.size() == 48);
  CHECK(kms.warnings.empty());
  const auto ref = python_json(
      "import json, numpy as np\n"
      "t, v, e = np.loadtxt('" + p + "', comments='#', skiprows=9, unpack=True)\n"
      "print(json.dumps({'n': int(t.size), 'v0': float(v[0]), 'e0': float(e[0]), 'mean_v': float(v.mean())}))\n");
  CHECK(ref["n"].get<int>() == 48);
  CHECK(kms.velocity_m_s[0] == doctest::Approx(1000 * ref["v0"].get<double>()).epsilon(1e-14));
  CHECK(kms.uncertainty_m_s[0] == doctest::Approx(1000 * ref["e0"].get<double>()).epsilon(1e-14));
  double mean = 0;
  for (double x : kms.velocity_m_s) mean += x / 48.0;
  CHECK(mean == doctest::Approx(1000 * ref["mean_v"].get<double>()).epsilon(1e-12));
  // Not declared: read as m/s, with a warning that the numbers look like km/s.
  const auto ms = apsides::load_velocities({p}, {{"HARPS"}});
  CHECK(ms.velocity_m_s[0] == doctest::Approx(ref["v0"].get<double>()));
  REQUIRE(ms.warnings.size() == 1);
  CHECK(ms.warnings[0].find("these look like km/s") != std::string::npos);
}

TEST_CASE("WASP-12b transit times (Wong et al. 2022): CRLF, a header and an O-C column that is skipped") {
  const std::string p = t::real_data("wasp12b_transits_wong2022.txt");
  const auto tt = apsides::read_transit_file(p);
  CHECK(tt.ignored_columns == std::vector<std::string>{"O-C"});
  const auto ref = python_json(
      "import json, numpy as np\n"
      "a = np.loadtxt('" + p + "', comments='#', skiprows=14)\n"
      "e, t, s = a[:, 0], a[:, 1], a[:, 2]\n"
      "ref = np.floor(0.5 * (t.min() + t.max()))\n"
      "u, c = np.unique(e, return_counts=True)\n"
      "print(json.dumps({'n': int(e.size), 'first_epoch': int(e[0]), 'last_epoch': int(e[-1]), 'ref': float(ref),"
      " 'repeated': int((c > 1).sum()), 'sum_s': float(s.sum()), 't_last': float(t[-1] - ref)}))\n");
  CHECK(tt.size() == ref["n"].get<std::size_t>());
  CHECK(tt.epoch.front() == ref["first_epoch"].get<long long>());
  CHECK(tt.epoch.back() == ref["last_epoch"].get<long long>());
  CHECK(tt.reference_epoch_bjd == ref["ref"].get<double>());
  CHECK(tt.time_days.back() == doctest::Approx(ref["t_last"].get<double>()).epsilon(1e-12));
  double ss = 0;
  for (double s : tt.uncertainty_days) ss += s;
  CHECK(ss == doctest::Approx(ref["sum_s"].get<double>()).epsilon(1e-12));
  // Epochs measured twice (independent light curves of one transit) are kept.
  std::map<long long, int> n;
  for (long long e : tt.epoch) ++n[e];
  int repeated = 0;
  for (const auto& [e, k] : n) repeated += k > 1;
  CHECK(repeated == ref["repeated"].get<int>());
  CHECK(repeated > 0);
  CHECK(tt.planet.front().empty());
  CHECK(tt.origin.front() == p + ":15");
}

TEST_CASE("HD 217107 (Rosenthal et al. 2021) reads as it is: four instruments, sval kept with its gaps, repeats kept") {
  const std::string p = t::real_data("hd217107_rv_cls_rosenthal2021.csv");
  const auto v = apsides::parse_project("[[velocities]]\nfile = \"" + p + "\"\n", "p.toml", "").load_velocities();
  // Independent reader: Python's csv module (line numbers 1-based, comments skipped).
  const auto ref = python_json(
      "import csv, json, collections\n"
      "lines = [(i + 1, l) for i, l in enumerate(open('" + p + "')) if not l.startswith('#')]\n"
      "rows = [(n, r) for (n, l) in lines[1:] for r in csv.reader([l])]\n"
      "seen = collections.defaultdict(list)\n"
      "for n, r in rows: seen[(r[0], r[3])].append(n)\n"
      "sv = [float(r[4]) for n, r in rows if r[4].strip()]\n"
      "print(json.dumps({'n': len(rows), 'counts': dict(collections.Counter(r[3] for n, r in rows)),"
      " 'n_sval': len(sv), 'sum_sval': sum(sv), 'sum_v': sum(float(r[1]) for n, r in rows),"
      " 'repeats': sorted([[k[0], k[1]] + v for k, v in seen.items() if len(v) > 1])}))\n");
  CHECK(ref["n"].get<std::size_t>() == 731);  // the data README says 730; the file holds 731 rows
  CHECK(v.size() == ref["n"].get<std::size_t>());
  CHECK(v.n_instruments() == 4);
  for (std::size_t i = 0; i < v.n_instruments(); ++i) {
    CAPTURE(v.instrument_names[i]);
    CHECK(v.count(static_cast<int>(i)) == ref["counts"][v.instrument_names[i]].get<std::size_t>());
  }
  double sv = 0;
  for (double x : v.velocity_m_s) sv += x;
  CHECK(sv == doctest::Approx(ref["sum_v"].get<double>()).epsilon(1e-12));
  REQUIRE(v.indicator_names() == std::vector<std::string>{"sval"});
  const auto& sval = v.indicators[0];
  CHECK(sval.count_present() == ref["n_sval"].get<std::size_t>());
  CHECK(sval.count_present() == 112);
  double ss = 0;
  for (double x : sval.value)
    if (!std::isnan(x)) ss += x;
  CHECK(ss == doctest::Approx(ref["sum_sval"].get<double>()).epsilon(1e-12));
  // The archive repeats two (time, instrument) pairs: both points kept, one warning naming the lines.
  const auto& rep = ref["repeats"];
  REQUIRE(rep.size() == 2);
  REQUIRE(v.warnings.size() == 1);
  CHECK(v.warnings[0] ==
        fmt::format("{}: 2 repeated (time, instrument) pairs, every point kept: lines {} and {} (time {}, '{}'); "
                    "lines {} and {} (time {}, '{}') (repeats = \"average\" merges them, \"error\" refuses them)",
                    p, rep[0][2].get<int>(), rep[0][3].get<int>(), rep[0][0].get<std::string>(),
                    rep[0][1].get<std::string>(), rep[1][2].get<int>(), rep[1][3].get<int>(),
                    rep[1][0].get<std::string>(), rep[1][1].get<std::string>()));
  // repeats = "average": one point per pair, the inverse-variance weighted mean (numpy).
  const auto avg = apsides::parse_project("[[velocities]]\nfile = \"" + p + "\"\nrepeats = \"average\"\n", "p.toml", "")
                       .load_velocities();
  CHECK(avg.size() == v.size() - 2);
  const auto mean = python_json(
      "import csv, json, numpy as np\n"
      "rows = [r for r in csv.reader(l for l in open('" + p + "') if not l.startswith('#'))][1:]\n"
      "g = [r for r in rows if r[0] == '" + rep[0][0].get<std::string>() + "' and r[3] == 'j']\n"
      "v = np.array([float(r[1]) for r in g]); e = np.array([float(r[2]) for r in g]); w = e ** -2\n"
      "print(json.dumps({'v': float((w * v).sum() / w.sum()), 'e': float(w.sum() ** -0.5)}))\n");
  const double t0 = std::stod(rep[0][0].get<std::string>()) - avg.reference_epoch_bjd;
  std::size_t k = 0;
  while (k < avg.size() && !(std::fabs(avg.time_days[k] - t0) < 1e-6 && avg.instrument_names[static_cast<std::size_t>(avg.instrument[k])] == "j")) ++k;
  REQUIRE(k < avg.size());
  CHECK(avg.velocity_m_s[k] == doctest::Approx(mean["v"].get<double>()).epsilon(1e-13));
  CHECK(avg.uncertainty_m_s[k] == doctest::Approx(mean["e"].get<double>()).epsilon(1e-13));
}

TEST_CASE("L 98-59 (Cloutier et al. 2019, CDS): fixed-width, no header, BJD - 2457000, indicators kept") {
  const std::string p = t::real_data("l9859_harps_cloutier2019.dat");
  // Column names and units from the CDS ReadMe beside the file: RV and e_RV in m/s, the
  // H alpha, beta, gamma indices x 100 with errors, NaD and S-index with errors, FWHM, BIS.
  const std::string project =
      "[[velocities]]\nfile = \"" + p + "\"\ntime_offset = 2457000\n"
      "columns = [\"time\", \"velocity\", \"uncertainty\", \"halpha\", \"e_halpha\", \"hbeta\", \"e_hbeta\", \"hgamma\", "
      "\"e_hgamma\", \"nad\", \"e_nad\", \"sindex\", \"e_sindex\", \"fwhm\", \"bis\"]\n";
  const auto v = apsides::parse_project(project, "p.toml", "").load_velocities();
  CHECK(v.size() == 165);
  CHECK(v.instrument_names == std::vector<std::string>{"l9859_harps_cloutier2019"});
  CHECK(v.warnings.empty());  // m/s as the ReadMe says: no unit warning
  CHECK(v.indicator_names() ==
        std::vector<std::string>{"halpha", "hbeta", "hgamma", "nad", "sindex", "fwhm", "bis"});
  for (const char* name : {"halpha", "hbeta", "hgamma", "nad", "sindex"}) CHECK(v.indicator(name)->has_uncertainty());
  CHECK_FALSE(v.indicator("fwhm")->has_uncertainty());
  // Independent reader: numpy for the numbers, Python's decimal for the exact times.
  const auto ref = python_json(
      "import json, decimal, numpy as np\n"
      "a = np.genfromtxt('" + p + "', missing_values='---', filling_values=np.nan)\n"
      "ts = sorted(decimal.Decimal(l.split()[0]) + 2457000 for l in open('" + p + "') if l.strip())\n"
      "r = decimal.Decimal(" + std::to_string(static_cast<long long>(v.reference_epoch_bjd)) + ")\n"
      "print(json.dumps({'n': int(a.shape[0]), 'sums': np.nansum(a, axis=0).tolist(),"
      " 'present': np.isfinite(a).sum(axis=0).tolist(), 't': [str(t - r) for t in ts]}))\n");
  CHECK(ref["n"].get<std::size_t>() == 165);
  REQUIRE(ref["t"].size() == v.size());
  double worst = 0;
  for (std::size_t i = 0; i < v.size(); ++i)
    worst = std::max(worst, std::fabs(v.time_days[i] - std::stod(ref["t"][i].get<std::string>())));
  CHECK(worst < 1e-9);
  auto sum = [](const std::vector<double>& x) {
    double s = 0;
    for (double y : x)
      if (!std::isnan(y)) s += y;
    return s;
  };
  const auto& sums = ref["sums"];
  CHECK(sum(v.velocity_m_s) == doctest::Approx(sums[1].get<double>()).epsilon(1e-12));
  CHECK(sum(v.uncertainty_m_s) == doctest::Approx(sums[2].get<double>()).epsilon(1e-12));
  CHECK(sum(v.indicator("halpha")->value) == doctest::Approx(sums[3].get<double>()).epsilon(1e-12));
  CHECK(sum(v.indicator("halpha")->uncertainty) == doctest::Approx(sums[4].get<double>()).epsilon(1e-12));
  CHECK(sum(v.indicator("sindex")->value) == doctest::Approx(sums[11].get<double>()).epsilon(1e-12));
  CHECK(sum(v.indicator("bis")->value) == doctest::Approx(sums[14].get<double>()).epsilon(1e-12));
  // FWHM and BIS are "---" (missing) on some rows, as the ReadMe's "?" allows.
  CHECK(v.indicator("fwhm")->count_present() == ref["present"][13].get<std::size_t>());
  CHECK(v.indicator("bis")->count_present() == ref["present"][14].get<std::size_t>());
  CHECK(v.indicator("fwhm")->count_present() < 165);
  CHECK(v.indicator("halpha")->count_present() == 165);
  // Without the declared offset the reduced times are refused, naming the offsets that fit.
  const std::string bare = "[[velocities]]\nfile = \"" + p + "\"\n";
  CHECK_THROWS_WITH_AS(apsides::parse_project(bare, "p.toml", "").load_velocities(),
                       doctest::Contains("looks reduced"), apsides::InputError);
}

TEST_CASE("TRAPPIST-1 transit times (Agol et al. 2021): seven planets, a linear ephemeris for each") {
  const std::string p = t::real_data("trappist1_transits_agol2021.csv");
  const auto tt = apsides::read_transit_file(p);
  // Independent reader and fit: Python's csv module and a weighted least-squares line in numpy.
  const auto ref = python_json(
      "import csv, json, collections, numpy as np\n"
      "rows = [r for r in csv.reader(l for l in open('" + p + "') if not l.startswith('#'))][1:]\n"
      "per = {}\n"
      "for k in sorted(set(r[3] for r in rows)):\n"
      "    g = [r for r in rows if r[3] == k]\n"
      "    n = np.array([float(r[0]) for r in g]); t = np.array([float(r[1]) for r in g])\n"
      "    w = np.array([float(r[2]) for r in g]) ** -2\n"
      "    A = np.vstack([np.ones_like(n), n]).T\n"
      "    per[k] = float(np.linalg.solve(A.T @ (A * w[:, None]), A.T @ (w * (t - 2457000)))[1])\n"
      "print(json.dumps({'n': len(rows), 'counts': dict(collections.Counter(r[3] for r in rows)),"
      " 'sum_s': sum(float(r[2]) for r in rows), 'period': per}))\n");
  CHECK(tt.size() == 447);
  CHECK(tt.size() == ref["n"].get<std::size_t>());
  double ss = 0;
  for (double s : tt.uncertainty_days) ss += s;
  CHECK(ss == doctest::Approx(ref["sum_s"].get<double>()).epsilon(1e-12));
  CHECK(tt.uncertainty_days.front() == 71e-5);  // written "71e-5" in the file
  REQUIRE(ref["counts"].size() == 7);
  // Periods (d) in the data README: Agol et al. 2021's N-body (osculating) periods. A linear
  // ephemeris fits the mean transit period over 2015-2019 instead, which the resonant chain's
  // timing variations (O-C up to ~30 min over a few hundred days) pull away from them: within
  // 1e-3 d for b, c, d, but 1.1e-3 to 5.7e-3 d for e, f, g, h (numpy's weighted fit of the same
  // times gives the same periods). Agol et al. 2021 also list linear-ephemeris periods [M]:
  // b 1.51088432, c 2.42179346, d 4.04978035, e 6.09956479, f 9.20659399, g 12.35355570,
  // h 18.76727450 d, quoted from memory; checked to 1e-4 d.
  struct Expect {
    double readme, readme_tol, linear_memory;
  };
  const std::map<std::string, Expect> expect = {
      {"b", {1.5109, 1e-3, 1.51088432}},  {"c", {2.4219, 1e-3, 2.42179346}},  {"d", {4.0492, 1e-3, 4.04978035}},
      {"e", {6.1010, 2e-3, 6.09956479}},  {"f", {9.2076, 2e-3, 9.20659399}},  {"g", {12.3524, 2e-3, 12.35355570}},
      {"h", {18.7730, 6e-3, 18.76727450}}};
  for (const auto& [letter, e] : expect) {
    CAPTURE(letter);
    const auto one = tt.for_planet(letter);
    CHECK(one.size() == ref["counts"][letter].get<std::size_t>());
    apsides::EphemerisOptions opt;
    opt.search_ttv = false;
    opt.n_next = 0;
    const auto r = apsides::fit_ephemeris(one, opt);
    REQUIRE(r.termination == "converged");
    CHECK(r.period_days.value == doctest::Approx(ref["period"][letter].get<double>()).epsilon(1e-10));
    CHECK(std::fabs(r.period_days.value - e.readme) < e.readme_tol);
    CHECK(std::fabs(r.period_days.value - e.linear_memory) < 1e-4);
  }
}

TEST_CASE("transit files: a planet label column, a label per file, and a fixed reference epoch") {
  const std::string d = t::temp_dir("data/transits");
  const std::string p = t::write_text(d, "t.csv", "0,2459000.1,0.001,b\n1,2459003.6,0.001,b\n0,2459001.0,0.002,c\n");
  const auto tt = apsides::read_transit_file(p);
  CHECK(tt.planet == std::vector<std::string>{"b", "b", "c"});
  const auto c = tt.for_planet("c");
  REQUIRE(c.size() == 1);
  CHECK(c.uncertainty_days[0] == 0.002);
  apsides::TransitFileOptions o;
  o.reference_epoch_bjd = 2459000.0;
  const auto fixed = apsides::read_transit_file(p, o);
  CHECK(fixed.time_days[1] == doctest::Approx(3.6).epsilon(1e-12));
  // One label forced on every row merges b and c: their epoch 0 then disagrees.
  o.planet = "d";
  CHECK_THROWS_AS(apsides::read_transit_file(p, o), apsides::InputError);
  const std::string single = t::write_text(d, "s.csv", "0,2459000.1,0.001\n1,2459003.6,0.001\n");
  CHECK(apsides::read_transit_file(single, o).planet == std::vector<std::string>{"d", "d"});
}

}  // TEST_SUITE
