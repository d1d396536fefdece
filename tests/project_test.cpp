// The project file: a three-line project gets every documented default, every key is
// read, data paths resolve relative to the project file, and the committed demo project
// loads its data (counts checked against the CSV files read by Python's csv module).
#include <doctest/doctest.h>

#include <cmath>
#include <filesystem>
#include <map>
#include <set>
#include <nlohmann/json.hpp>
#include <string>

#include "apsides/error.h"
#include "apsides/project.h"
#include "test_support.h"

namespace {
namespace t = apsides::test;
}

TEST_SUITE("project") {

TEST_CASE("a three-line project gets the documented defaults") {
  const auto pr = apsides::parse_project("[[velocities]]\nfile = \"rv.csv\"\n", "p.toml", "/data");
  REQUIRE(pr.velocities.size() == 1);
  CHECK(pr.velocities[0].file == "/data/rv.csv");
  CHECK(pr.velocities[0].options.instrument.empty());
  CHECK(pr.velocities[0].options.unit == apsides::VelocityUnit::kMetersPerSecond);
  CHECK(pr.velocities[0].origin == "p.toml:2");
  CHECK_FALSE(pr.star.mass_msun.has_value());
  CHECK(pr.star.mass_err_msun == 0.0);
  CHECK(pr.transits.empty());
  CHECK(pr.search.max_planets == 3);
  CHECK(pr.search.oversample == 10.0);
  CHECK(pr.search.fap_threshold == 1e-3);
  CHECK_FALSE(pr.model.planets.has_value());
  CHECK(pr.model.trend == apsides::Trend::kNone);
  CHECK(pr.model.fit_jitter);
  CHECK(pr.sampler.walkers == 0);
  CHECK(pr.sampler.max_steps == 200000);
  CHECK(pr.sampler.seed == 1);
  CHECK(pr.evidence.live_points == 500);
  CHECK(pr.priors.empty());
}

TEST_CASE("every section's keys are read") {
  const std::string text = R"([star]
name = "HD 1"
mass_msun = 0.93
mass_err_msun = 0.04
radius_rsun = 0.9
radius_err_rsun = 0.05
[[velocities]]
file = "north.csv"
instrument = "north"
velocity_unit = "km/s"
[[velocities]]
file = "/abs/south.csv"
[[transits]]
file = "times.csv"
planet = "c"
[search]
max_planets = 2
min_period_d = 1.5
max_period_d = 3000
[model]
planets = 2
trend = "linear"
fit_jitter = false
eccentricity = "beta"
[priors]
"b.period_d" = { dist = "log-uniform", min = 1, max = 100 }
[sampler]
walkers = 64
seed = 9
[evidence]
live_points = 100
)";
  const auto pr = apsides::parse_project(text, "dir/p.toml", "dir");
  CHECK(pr.star.name == "HD 1");
  CHECK(*pr.star.mass_msun == 0.93);
  CHECK(pr.star.mass_err_msun == 0.04);
  CHECK(*pr.star.radius_rsun == 0.9);
  REQUIRE(pr.velocities.size() == 2);
  CHECK(pr.velocities[0].file == "dir/north.csv");
  CHECK(pr.velocities[0].options.instrument == "north");
  CHECK(pr.velocities[0].options.unit == apsides::VelocityUnit::kKilometersPerSecond);
  CHECK(pr.velocities[1].file == "/abs/south.csv");
  REQUIRE(pr.transits.size() == 1);
  CHECK(pr.transits[0].planet == "c");
  CHECK(pr.search.max_planets == 2);
  CHECK(*pr.search.min_period_d == 1.5);
  CHECK(*pr.model.planets == 2);
  CHECK(pr.model.trend == apsides::Trend::kLinear);
  CHECK_FALSE(pr.model.fit_jitter);
  CHECK(pr.model.eccentricity == apsides::EccentricityPriorKind::kBeta);
  REQUIRE(pr.priors.size() == 1);
  CHECK(pr.priors[0].parameter == "b.period_d");
  CHECK(pr.priors[0].origin == "dir/p.toml:26");
  CHECK(pr.sampler.walkers == 64);
  CHECK(pr.sampler.seed == 9);
  CHECK(pr.evidence.live_points == 100);
  CHECK(pr.text == text);
}

TEST_CASE("the reading keys of [[velocities]] and [[transits]] are read, with their defaults") {
  const std::string text = R"([[velocities]]
file = "a.dat"
time_offset = 2457000
repeats = "average"
indicators = ["halpha", "fwhm"]
columns = ["time", "velocity", "uncertainty", "halpha", "halpha_err", "fwhm"]
[[velocities]]
file = "b.csv"
[[transits]]
file = "t.csv"
time_offset = 2400000.5
[[transits]]
file = "u.csv"
)";
  const auto pr = apsides::parse_project(text, "p.toml", "");
  REQUIRE(pr.velocities.size() == 2);
  const auto& a = pr.velocities[0].options;
  REQUIRE(a.time_offset_days.has_value());
  CHECK(*a.time_offset_days == 2457000.0);
  CHECK(a.repeats == apsides::RepeatPolicy::kAverage);
  REQUIRE(a.indicators.has_value());
  CHECK(*a.indicators == std::vector<std::string>{"halpha", "fwhm"});
  CHECK(a.columns.size() == 6);
  CHECK(a.declared_at == "p.toml:2");
  const auto& b = pr.velocities[1].options;
  CHECK_FALSE(b.time_offset_days.has_value());
  CHECK(b.repeats == apsides::RepeatPolicy::kKeep);
  CHECK_FALSE(b.indicators.has_value());
  CHECK(b.columns.empty());
  REQUIRE(pr.transits.size() == 2);
  CHECK(*pr.transits[0].time_offset_days == 2400000.5);
  CHECK(pr.transits[1].planet.empty());  // no key: the file's planet column, else b
  CHECK_FALSE(pr.transits[1].time_offset_days.has_value());
}

// Each real file of tests/data/real as a user would name it in a project: `file` plus at
// most three lines. The checks after loading are the counts the README gives.
TEST_CASE("every real data file reads with at most three project lines beyond `file`") {
  struct Snippet {
    std::string block, file;
    std::vector<std::string> extra;  // the lines beyond `file`
  };
  const std::vector<Snippet> snippets = {
      {"velocities", "51peg_rv_birkby2017.txt", {}},
      {"velocities", "hd20868_rv_moutou2009.txt", {"velocity_unit = \"km/s\""}},
      {"velocities", "hd217107_rv_cls_rosenthal2021.csv", {}},
      {"velocities", "l9859_harps_cloutier2019.dat",
       {"time_offset = 2457000",
        "columns = [\"time\", \"velocity\", \"uncertainty\", \"halpha\", \"e_halpha\", \"hbeta\", \"e_hbeta\", "
        "\"hgamma\", \"e_hgamma\", \"nad\", \"e_nad\", \"sindex\", \"e_sindex\", \"fwhm\", \"bis\"]"}},
      {"transits", "wasp12b_transits_wong2022.txt", {}},
      {"transits", "trappist1_transits_agol2021.csv", {}},
  };
  const std::map<std::string, std::size_t> rows = {
      {"51peg_rv_birkby2017.txt", 639}, {"hd20868_rv_moutou2009.txt", 48}, {"hd217107_rv_cls_rosenthal2021.csv", 731},
      {"l9859_harps_cloutier2019.dat", 165}, {"trappist1_transits_agol2021.csv", 447}};
  for (const Snippet& sn : snippets) {
    CAPTURE(sn.file);
    CHECK(sn.extra.size() <= 3);
    std::string text = "[[" + sn.block + "]]\nfile = \"" + t::real_data(sn.file) + "\"\n";
    for (const auto& line : sn.extra) text += line + "\n";
    if (sn.block == "transits") text += "[[velocities]]\nfile = \"" + t::real_data("51peg_rv_birkby2017.txt") + "\"\n";
    const auto pr = apsides::parse_project(text, "p.toml", "");
    if (sn.block == "velocities") {
      const auto v = pr.load_velocities();
      CHECK(v.size() == rows.at(sn.file));
      for (const auto& w : v.warnings) CHECK(w.find("repeated (time, instrument)") != std::string::npos);
    } else {
      const auto tr = pr.load_transits();
      if (rows.count(sn.file)) CHECK(tr.size() == rows.at(sn.file));
      CHECK(tr.size() > 100);
    }
  }
  // TRAPPIST-1 through the project keeps the file's planet letters.
  const auto pr = apsides::parse_project("[[velocities]]\nfile = \"" + t::real_data("51peg_rv_birkby2017.txt") +
                                             "\"\n[[transits]]\nfile = \"" + t::real_data("trappist1_transits_agol2021.csv") + "\"\n",
                                         "p.toml", "");
  const auto tr = pr.load_transits();
  const std::set<std::string> letters(tr.planet.begin(), tr.planet.end());
  CHECK(letters == std::set<std::string>{"b", "c", "d", "e", "f", "g", "h"});
}

TEST_CASE("data paths are relative to the project file, wherever the program runs") {
  const std::string d = t::temp_dir("project/relative");
  std::filesystem::create_directories(d + "/proj/data");
  t::write_text(d, "proj/data/rv.csv", "2459000.5,1,1\n2459001.5,2,1\n2459002.5,3,1\n");
  const std::string toml = t::write_text(d, "proj/project.toml", "[[velocities]]\nfile = \"data/rv.csv\"\ninstrument = \"x\"\n");
  const auto data = apsides::load_project(toml).load_velocities();
  CHECK(data.size() == 3);
  CHECK(data.instrument_names == std::vector<std::string>{"x"});
}

TEST_CASE("the demo project loads its three instruments and transit times as Python's csv reads them") {
  const std::string demo = t::source_dir() + "/datasets_synthetic/demo";
  const auto pr = apsides::load_project(demo + "/project.toml");
  const auto v = pr.load_velocities();
  const auto tr = pr.load_transits();
  const auto r = t::run_python(
      "import csv, json\n"
      "d = '" + demo + "'\n"
      "n = {k: len(list(csv.DictReader(open(f'{d}/velocities_{k}.csv')))) for k in ['Kestrel', 'Tern', 'Petrel']}\n"
      "p = [float(r['velocity']) for r in csv.DictReader(open(f'{d}/velocities_Petrel.csv'))]\n"
      "print(json.dumps({'n': n, 'transits': len(list(csv.DictReader(open(f'{d}/transits.csv')))), 'petrel0': p[0]}))\n");
  REQUIRE_MESSAGE(r.status == 0, r.output);
  const auto ref = nlohmann::json::parse(r.output);
  CHECK(v.instrument_names == std::vector<std::string>{"Kestrel", "Tern", "Petrel"});
  for (int i = 0; i < 3; ++i) CHECK(v.count(i) == ref["n"][v.instrument_names[static_cast<std::size_t>(i)]].get<std::size_t>());
  CHECK(tr.size() == ref["transits"].get<std::size_t>());
  CHECK(tr.planet.front() == "b");
  // Petrel is declared km/s: converted to m/s on reading.
  const auto petrel = v.subset(2);
  CHECK(petrel.velocity_m_s.front() == doctest::Approx(1000 * ref["petrel0"].get<double>()).epsilon(1e-14));
  CHECK(v.warnings.empty());
}

}  // TEST_SUITE

TEST_CASE("[noise]: a GP with its kernel, amplitude per instrument and rotation hint; one-line errors") {
  const std::string base = "[[velocities]]\nfile = \"rv.csv\"\n";
  const auto pr = apsides::parse_project(
      base + "[noise]\nkind = \"gp\"\nkernel = \"quasi_periodic\"\nper_instrument_amplitude = true\nrotation_period_d = 27.5\n",
      "p.toml", "/data");
  CHECK(pr.model.noise.kind == apsides::NoiseKind::kGaussianProcess);
  CHECK(pr.model.noise.kernel == apsides::gp::KernelKind::kQuasiPeriodic);
  CHECK(pr.model.noise.per_instrument_amplitude);
  CHECK(pr.model.rotation_hint_d == 27.5);
  CHECK(pr.model.rotation_hint_source.find("p.toml") != std::string::npos);
  // Default: white noise, no hint.
  const auto white = apsides::parse_project(base, "p.toml", "/data");
  CHECK(white.model.noise.kind == apsides::NoiseKind::kWhite);
  CHECK(std::isnan(white.model.rotation_hint_d));
  auto error_of = [&](const std::string& noise) {
    try {
      (void)apsides::parse_project(base + noise, "p.toml", "/data");
    } catch (const apsides::InputError& e) {
      return std::string(e.what());
    }
    return std::string("no error");
  };
  CHECK(error_of("[noise]\nkind = \"red\"\n").find("noise.kind") != std::string::npos);
  CHECK(error_of("[noise]\nkind = \"gp\"\nkernel = \"spline\"\n").find("unknown kernel 'spline'") != std::string::npos);
  CHECK(error_of("[noise]\nkind = \"gp\"\nrotation_period_d = -3\n").find("must be > 0") != std::string::npos);
  CHECK(error_of("[noise]\nkernel = \"sho\"\n").find("kind is \"white\"") != std::string::npos);
  CHECK(error_of("[noise]\nkind = \"gp\"\ncolour = 1\n").find("colour") != std::string::npos);
  for (const std::string& e : {error_of("[noise]\nkind = \"red\"\n"), error_of("[noise]\nkernel = \"sho\"\n")}) {
    CHECK(e.find("p.toml") != std::string::npos);
    CHECK(e.find('\n') == std::string::npos);
  }
}
