// Reading velocity and transit-time files: delimiters, headers, instrument labels, units,
// full-precision times, several files, and the three real published files read as they
// are (copied into tests/data/real/, sources in its README). Counts, sums and
// exact reduced times are checked against an independent reader: numpy / Python's
// decimal module through /usr/bin/python3.
#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>

#include "apsides/data.h"
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

TEST_CASE("extra numeric columns of a velocity file are skipped and listed") {
  const std::string d = t::temp_dir("data/extra_columns");
  const std::string p = t::write_text(d, "x.csv", "bjd,rv,erv,fwhm,bis,inst\n2459000.5,1,1,7.1,-20,H\n2459001.5,2,1,7.2,-21,H\n");
  const auto f = apsides::read_velocity_file(p, {});
  CHECK(f.ignored_columns == std::vector<std::string>{"fwhm", "bis"});
  CHECK(f.instrument == std::vector<std::string>{"H", "H"});
  REQUIRE(f.warnings.size() == 1);
  CHECK(f.warnings[0] == p + ": skipped extra numeric column(s): fwhm, bis");
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
