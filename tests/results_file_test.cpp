#include "apsides/results_file.h"

#include <doctest/doctest.h>

#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <regex>

#include "apsides/error.h"
#include "apsides/posterior.h"
#include "test_support.h"

using apsides::ResultsFile;

TEST_SUITE("results_file") {
  TEST_CASE("results_file: chains, state, data and attributes round-trip through h5py") {
    const std::string dir = apsides::test::temp_dir("results_file_roundtrip");
    const std::string path = dir + "/run.h5";
    const int walkers = 4;
    const std::size_t dim = 3;
    {
      ResultsFile f(path, ResultsFile::Mode::kCreate);
      apsides::VelocityData d;
      d.reference_epoch_bjd = 2459000.0;
      d.time_days = {-1.5, 0.25, 3.0};
      d.velocity_m_s = {1.0, -2.0, 3.5};
      d.uncertainty_m_s = {0.5, 0.6, 0.7};
      d.instrument = {0, 1, 0};
      d.instrument_names = {"north", "south"};
      f.write_velocity_data(d);
      f.write_project_text("[[velocities]]\nfile = \"rv.csv\"\n");
      f.write_parameters({"a", "b", "c"}, {"d", "m/s", ""}, {"uniform(0, 1)", "normal(0, 1)", "uniform(-1, 1)"});
      f.create_chains(walkers, dim, 42, "test", 1);
      std::vector<std::vector<double>> pos, lp;
      for (int s = 0; s < 5; ++s) {
        std::vector<double> row(walkers * dim), l(walkers);
        for (std::size_t i = 0; i < row.size(); ++i) row[i] = 100.0 * s + static_cast<double>(i) + 0.125;
        for (int w = 0; w < walkers; ++w) l[static_cast<std::size_t>(w)] = -s - 0.5 * w;
        pos.push_back(row);
        lp.push_back(l);
      }
      f.append_chain_rows(pos, lp);
      apsides::SamplerState st;
      st.step = 5;
      st.positions = pos.back();
      st.log_prob = lp.back();
      st.accepted = {1, 2, 3, 4};
      f.write_checkpoint(st);
      // Rows appended without a checkpoint (as if killed before the next one) are dropped on resume.
      f.append_chain_rows({pos[0]}, {lp[0]});
      f.create_group("/periodograms/rv");
      f.write_vector("/periodograms/rv/power", std::vector<double>{0.1, 0.9}, "", "GLS power");
    }
    // Outside reader: h5py (Debian python3-h5py) through /usr/bin/python3.
    const auto r = apsides::test::run_python(
        "import h5py, numpy as np\n"
        "f = h5py.File('" + path + "', 'r')\n"
        "p = f['chains/positions']\n"
        "print(p.shape, p.chunks is not None, p.maxshape[0] is None)\n"
        "print(p[4, 3, 2], f['chains/log_prob'][2, 1])\n"
        "print(f['data/time_d'].attrs['unit'], f['data'].attrs['reference_epoch_bjd'])\n"
        "print([s.decode() for s in f['data/instrument_names'][()]], list(f['data/instrument'][()]))\n"
        "print(f['project/text'][()].decode().splitlines()[0])\n"
        "print(f['chains'].attrs['steps'], list(f['chains/state/accepted'][()]))\n"
        "print(f['periodograms/rv/power'].attrs['description'])\n");
    REQUIRE(r.status == 0);
    CHECK(r.output ==
          "(6, 4, 3) True True\n"  // the sixth row lies past the checkpoint ("steps" = 5)

          "411.125 -2.5\n"
          "d 2459000.0\n"
          "['north', 'south'] [0, 1, 0]\n"
          "[[velocities]]\n"
          "5 [1, 2, 3, 4]\n"
          "GLS power\n");
    {
      ResultsFile f(path, ResultsFile::Mode::kReadWrite);
      CHECK(f.shape("/chains/positions")[0] == 6);
      const apsides::SamplerState st = f.read_checkpoint();
      CHECK(st.step == 5);
      CHECK(f.shape("/chains/positions")[0] == 5);
      CHECK(st.accepted == std::vector<long>{1, 2, 3, 4});
      CHECK(f.read_chain_row(2) == std::vector<double>([] {
              std::vector<double> v(12);
              for (std::size_t i = 0; i < 12; ++i) v[i] = 100.0 + static_cast<double>(i) + 0.125;
              return v;
            }()));
      const auto every2 = f.read_chain_rows(1, 5, 2);
      CHECK(every2.size() == 3 * 12);
      CHECK(every2[12] == 200.125);
      CHECK(f.read_strings("/parameters/units")[1] == "m/s");
    }
  }

  TEST_CASE("results_file: a missing or non-HDF5 file is an input error naming it") {
    const std::string dir = apsides::test::temp_dir("results_file_bad");
    CHECK_THROWS_WITH_AS(ResultsFile(dir + "/none.h5", ResultsFile::Mode::kReadOnly), (dir + "/none.h5: no such file").c_str(),
                         apsides::InputError);
    const std::string text = apsides::test::write_text(dir, "x.h5", "not hdf5");
    CHECK_THROWS_WITH_AS(ResultsFile(text, ResultsFile::Mode::kReadOnly), (text + ": not an HDF5 file").c_str(),
                         apsides::InputError);
  }

  TEST_CASE("results_file: quantiles and rounding follow the significant digits of the uncertainty") {
    // numpy.percentile([1..101], [15.8655, 50, 84.1345]) (linear interpolation, numpy default).
    std::vector<double> v;
    for (int i = 1; i <= 101; ++i) v.push_back(i);
    const auto q = apsides::quantiles(v);
    CHECK(q.median == doctest::Approx(51.0));
    CHECK(q.minus == doctest::Approx(51.0 - 16.86552539314571));
    CHECK(q.plus == doctest::Approx(85.13447460685429 - 51.0));
    CHECK(apsides::format_with_uncertainty({12.3456, 0.0123, 0.0147}) == "12.346 +0.015 -0.012");
    CHECK(apsides::format_with_uncertainty({118.61234, 0.52, 0.61}) == "118.6 +0.6 -0.5");
    CHECK(apsides::format_with_uncertainty({2459452.123456, 1.9, 2.3}) == "2459452.1 +2.3 -1.9");
    CHECK(apsides::format_with_uncertainty({1234.0, 56.0, 71.0}) == "1230 +70 -60");
  }

  TEST_CASE("results_file: derived m sin i, a and the stellar-mass draws agree with orbit.h and the mass spread") {
    apsides::ModelLayout layout;
    layout.n_planets = 1;
    layout.n_instruments = 1;
    const auto p = apsides::Planet::from_elements(4.231, 56.0, 0.0, 0.0, 0.0);
    std::vector<double> theta(layout.n_params(), 0.0);
    apsides::put_planet(theta, layout, 0, p);
    std::vector<double> samples;
    for (int i = 0; i < 20000; ++i) samples.insert(samples.end(), theta.begin(), theta.end());
    apsides::DerivedOptions o;
    o.star_mass_msun = 1.0;
    o.star_mass_err_msun = 0.05;
    const auto d = apsides::derive_posterior(samples, layout, o);
    const auto m = apsides::quantiles(d.values[d.index("star.mass_msun")]);
    CHECK(m.median == doctest::Approx(1.0).epsilon(0.002));
    CHECK(0.5 * (m.minus + m.plus) == doctest::Approx(0.05).epsilon(0.03));
    // 51 Peg b, Marcy et al. 1997 (CHECKS.md section 2): 0.45 M_J at M = 1 M_sun.
    const auto msini = apsides::quantiles(d.values[d.index("b.msini_mjup")]);
    CHECK(msini.median == doctest::Approx(0.45).epsilon(0.012));
    // m sin i ~ M^(2/3): a 5 % mass spread gives ~3.3 %.
    CHECK(0.5 * (msini.minus + msini.plus) / msini.median == doctest::Approx(0.05 * 2.0 / 3.0).epsilon(0.1));
  }
}

namespace {
const std::string kNum = "(-?[0-9]+\\.?[0-9]*(?:e[-+][0-9]+)?)";

std::vector<std::smatch> matches(const std::string& text, const std::regex& re) {
  std::vector<std::smatch> out;
  for (std::sregex_iterator it(text.begin(), text.end(), re), end; it != end; ++it) out.push_back(*it);
  return out;
}

void same(const std::string& what, const nlohmann::json& value, const std::string& printed) {
  INFO(what, ": JSON ", value.dump(), ", printed ", printed);
  REQUIRE(value.is_number());
  CHECK(apsides::test::agrees_to_printed(value.get<double>(), printed));
}

// `sample` prints its JSON's sampler numbers (the output contract).
void sample_contract(const std::string& text, const std::string& json_text) {
  const auto j = nlohmann::json::parse(json_text)["sampler"];
  const auto m = matches(text, std::regex("([a-z_ ]+): ([0-9]+) steps x ([0-9]+) walkers \\(burn-in ([0-9]+) discarded\\), "
                                          "R-hat max " + kNum + ", ESS min " + kNum + ", tau max " + kNum));
  REQUIRE_MESSAGE(m.size() == 1, text);
  CHECK(m[0][1].str() == j["termination"].get<std::string>());
  CHECK(std::stol(m[0][2]) == j["steps"].get<long>());
  CHECK(std::stoi(m[0][3]) == j["walkers"].get<int>());
  CHECK(std::stol(m[0][4]) == j["burn_in_steps"].get<long>());
  same("rhat_max", j["rhat_max"], m[0][5]);
  same("ess_min", j["ess_min"], m[0][6]);
  same("tau_max", j["tau_max"], m[0][7]);
  CHECK(apsides::test::per_parameter_length_mismatches(json_text).empty());
}

// `summarize` prints its JSON's medians and intervals, sampler and data numbers.
void summarize_contract(const std::string& text, const std::string& json_text) {
  const auto j = nlohmann::json::parse(json_text);
  std::map<std::string, std::smatch> row;
  for (const auto& m : matches(text, std::regex("\\n  ([A-Za-z0-9_.]+) +" + kNum + " \\+([0-9.e+-]+) -([0-9.e+-]+)")))
    row.emplace(m[1].str(), m);
  auto quantity = [&](const std::string& name, const nlohmann::json& q) {
    if (q.is_null()) return;
    CAPTURE(name);
    REQUIRE(row.count(name) == 1);
    const auto& m = row.at(name);
    // format_with_uncertainty rounds the median to the uncertainty's last digit.
    const double unit = std::min(apsides::test::half_last_digit(m[3]), apsides::test::half_last_digit(m[4]));
    CHECK(std::fabs(q["median"].get<double>() - std::stod(m[2])) <= std::max(unit, apsides::test::half_last_digit(m[2])) * (1 + 1e-9));
    same(name + " plus", q["plus"], m[3]);
    same(name + " minus", q["minus"], m[4]);
  };
  std::size_t checked = 0;
  for (const auto& p : j["planets"])
    for (const auto& [k, q] : p.items())
      if (k != "label") {
        quantity(p["label"].get<std::string>() + "." + k, q);
        ++checked;
      }
  for (const auto& in : j["instruments"]) {
    quantity(in["name"].get<std::string>() + ".offset_ms", in["offset_ms"]);
    quantity(in["name"].get<std::string>() + ".jitter_ms", in["jitter_ms"]);
  }
  CHECK(checked >= 20);
  const auto s = matches(text, std::regex("Sampler: ([0-9]+) walkers x ([0-9]+) steps, first ([0-9]+) discarded"));
  REQUIRE(s.size() == 1);
  CHECK(std::stoi(s[0][1]) == j["sampler"]["walkers"].get<int>());
  CHECK(std::stol(s[0][2]) == j["sampler"]["steps"].get<long>());
  CHECK(std::stol(s[0][3]) == j["sampler"]["burn_in_steps"].get<long>());
  const auto c = matches(text, std::regex("Convergence: R-hat max " + kNum + ", ESS min " + kNum + ", tau max " + kNum));
  REQUIRE(c.size() == 1);
  same("rhat_max", j["sampler"]["rhat_max"], c[0][1]);
  same("ess_min", j["sampler"]["ess_min"], c[0][2]);
  same("tau_max", j["sampler"]["tau_max"], c[0][3]);
  const auto d = matches(text, std::regex("Data: ([0-9]+) velocities from ([0-9]+) instrument\\(s\\), baseline " + kNum + " d"));
  REQUIRE(d.size() == 1);
  CHECK(std::stoi(d[0][1]) == j["data"]["n_points"].get<int>());
  CHECK(std::stoul(d[0][2]) == j["data"]["instruments"].size());
  same("baseline_d", j["data"]["baseline_d"], d[0][3]);
  CHECK(apsides::test::per_parameter_length_mismatches(json_text).empty());
}

// Every per-parameter dataset of the results file has one row per parameter, in the order
// of /parameters/names (read by h5py, outside apsides).
// /parameters/priors is not checked yet: its rows are not one per parameter until the
// parameter descriptions are rebuilt (issue 20 item 3, the lead's refactor); for two
// planets it even has 16 rows for 16 parameters, misaligned (one eccentricity row covers
// secosw and sesinw, two notes close the list). The checks to add then, in the Python below:
//   assert len(f['parameters/priors']) == n
//   assert all(p.decode().split()[0] == name for p, name in zip(f['parameters/priors'][()], names))
void per_parameter_datasets(const std::string& path) {
  const auto r = apsides::test::run_python(
      "import h5py\n"
      "f = h5py.File('" + path + "', 'r')\n"
      "names = [s.decode() for s in f['parameters/names'][()]]\n"
      "n = len(names)\n"
      "assert n == 16, names\n"
      "assert len(set(names)) == n\n"
      "assert len(f['parameters/units']) == n\n"
      "assert f['map/theta'].shape == (n,)\n"
      "assert f['chains/positions'].shape[2] == n\n"
      "assert f['chains/state/positions'].shape[1] == n\n"
      "for k in ['rhat', 'ess_bulk', 'ess_tail', 'tau']:\n"
      "    assert f['diagnostics/' + k].shape == (n,), k\n"
      "assert [s.decode() for s in f['diagnostics/names'][()]] == names\n"
      "w = int(f['chains'].attrs['walkers']); stride = int(f['chains'].attrs['stride'])\n"
      "steps = int(f['chains'].attrs['steps'])\n"
      "assert f['chains/positions'].shape[:2] == (steps // stride, w)\n"
      "assert list(f['chains/step'][()]) == list(range(stride, steps + 1, stride))\n"
      "assert f['chains/log_prob'].shape == (steps // stride, w)\n"
      "print('ok')\n");
  CHECK_MESSAGE(r.output == "ok\n", r.output);
}

// A project on the bundled demo system (two planets, three instruments), data files by
// absolute path so the project can live in a temporary directory.
std::string demo_project(const std::string& dir, long checkpoint_steps) {
  const std::string demo = apsides::test::source_dir() + "/datasets_synthetic/demo/";
  std::string text = "[star]\nmass_msun = 0.86\nmass_err_msun = 0.03\n";
  for (const char* inst : {"Kestrel", "Tern", "Petrel"}) {
    text += std::string("[[velocities]]\nfile = \"") + demo + "velocities_" + inst + ".csv\"\ninstrument = \"" + inst + "\"\n";
    if (std::string(inst) == "Petrel") text += "velocity_unit = \"km/s\"\n";
  }
  text += "[model]\nplanets = 2\n[sampler]\nwalkers = 32\nseed = 7\ness_target = 1e9\ncheckpoint_steps = " +
          std::to_string(checkpoint_steps) + "\n";
  return apsides::test::write_text(dir, "project.toml", text);
}
}  // namespace

TEST_SUITE("results_file") {
  TEST_CASE("results_file: a kill -9 of apsides sample, then --resume, ends bitwise equal to an uninterrupted run") {
    const std::string dir = apsides::test::temp_dir("results_file_kill");
    const std::string project = demo_project(dir, 500);
    const std::string bin = apsides::test::apsides_binary();
    const std::string steps = "12000";
    const auto full = apsides::test::run_command(bin + " sample " + project + " --out " + dir + "/full.h5 --quiet --max-steps " +
                                                 steps + " --json " + dir + "/sample.json", false);
    REQUIRE_MESSAGE(full.status == 0, full.output);
    sample_contract(full.output, apsides::test::read_file(dir + "/sample.json"));
    // Start the same run, kill -9 it once the file has grown past a few checkpoints (2 MB:
    // the stored rows are compressed, the off-stride diagnostic rows are not).
    const std::string killer =
        "cd " + dir + " && (" + bin + " sample " + project + " --out killed.h5 --quiet --max-steps " + steps +
        " > /dev/null 2>&1 & pid=$!; "
        "while kill -0 $pid 2>/dev/null && [ $(stat -c%s killed.h5 2>/dev/null || echo 0) -lt 2000000 ]; do sleep 0.02; done; "
        "kill -9 $pid 2>/dev/null && echo killed; wait $pid 2>/dev/null; true)";
    const auto k = apsides::test::run_command(killer);
    REQUIRE_MESSAGE(k.output.find("killed") != std::string::npos, "the run finished before it could be killed");
    // The killed file opens in h5py without apsides.
    const auto probe = apsides::test::run_python("import h5py\nf = h5py.File('" + dir +
                                                 "/killed.h5', 'r')\nprint(f['chains'].attrs['steps'] < " + steps + ")\n");
    CHECK(probe.output == "True\n");
    const auto resumed = apsides::test::run_command(bin + " sample " + project + " --out " + dir +
                                                    "/killed.h5 --resume --quiet --max-steps " + steps);
    REQUIRE_MESSAGE(resumed.status == 0, resumed.output);
    // Compared by h5py: every stored number identical.
    const auto cmp = apsides::test::run_python(
        "import h5py, numpy as np\n"
        "a = h5py.File('" + dir + "/full.h5', 'r'); b = h5py.File('" + dir + "/killed.h5', 'r')\n"
        "print(a['chains/positions'].shape == b['chains/positions'].shape,\n"
        "      np.array_equal(a['chains/positions'][()], b['chains/positions'][()]),\n"
        "      np.array_equal(a['chains/log_prob'][()], b['chains/log_prob'][()]),\n"
        "      np.array_equal(a['derived/b.msini_mjup'][()], b['derived/b.msini_mjup'][()]))\n");
    CHECK(cmp.output == "True True True True\n");

    // summarize: JSON contract keys, and the demo's truth inside the 95 % intervals
    // (median +- 2 x the 16/84 half-widths; truth from datasets_synthetic/demo/truth.json).
    const auto sum = apsides::test::run_command(bin + " summarize " + dir + "/full.h5 --json " + dir + "/summary.json", false);
    REQUIRE_MESSAGE(sum.status == 0, sum.output);
    CHECK(sum.output.find("MINIMUM mass") != std::string::npos);
    summarize_contract(sum.output, apsides::test::read_file(dir + "/summary.json"));
    per_parameter_datasets(dir + "/full.h5");
    const auto check = apsides::test::run_python(
        "import json\n"
        "s = json.load(open('" + dir + "/summary.json'))\n"
        "t = json.load(open('" + apsides::test::source_dir() + "/datasets_synthetic/demo/truth.json'))\n"
        "assert set(['data', 'planets', 'instruments', 'sampler']) <= set(s)\n"
        "assert set(['walkers', 'steps', 'rhat_max', 'ess_min', 'tau_max']) <= set(s['sampler'])\n"
        "bad = []\n"
        "for sp, tp in zip(s['planets'], t['planets']):\n"
        "    for k in ['period_d', 'K_ms', 'ecc', 'msini_mjup', 'a_au']:\n"
        "        q = sp[k]; assert set(q) == {'median', 'minus', 'plus'}\n"
        "        lo, hi = q['median'] - 2 * q['minus'], q['median'] + 2 * q['plus']\n"
        "        if not (lo <= tp[k] <= hi) and not (k == 'ecc' and tp[k] < hi): bad.append((sp['label'], k, tp[k], lo, hi))\n"
        "for si, ti in zip(s['instruments'], t['instruments']):\n"
        "    q = si['offset_ms']\n"
        "    if not (q['median'] - 2 * q['minus'] <= ti['offset_ms'] <= q['median'] + 2 * q['plus']): bad.append((si['name'], ti['offset_ms'], q))\n"
        "print(bad)\n");
    CHECK(check.output == "[]\n");
  }
}

namespace {
// The sampler streaming into a ResultsFile through a ChainWriter, as sample_project does.
class WriterObserver : public apsides::SamplerObserver {
 public:
  WriterObserver(ResultsFile& f, std::size_t diagnostic_rows) : writer_(f, diagnostic_rows) {}
  void on_step(long step, std::span<const double> p, std::span<const double> lp) override { writer_.add_step(step, p, lp); }
  void on_checkpoint(const apsides::SamplerState& s) override { writer_.checkpoint(s); }

 private:
  apsides::ChainWriter writer_;
};

// An anisotropic Gaussian in 3-D (sd 1, 2, 0.5): cheap, and converges in a few thousand steps.
double gaussian3(std::span<const double> x) {
  return -0.5 * (x[0] * x[0] + x[1] * x[1] / 4.0 + x[2] * x[2] / 0.25);
}

apsides::SamplerOptions small_run_options() {
  apsides::SamplerOptions o;
  o.walkers = 8;
  o.max_steps = 6000;
  o.min_steps = 200;
  o.check_every_steps = 100;
  o.checkpoint_steps = 50;
  o.diagnostic_rows = 16;  // the diagnostics' thinning passes the stride 16 at step 264
  o.ess_target = 150;
  o.rhat_max = 1.05;
  o.min_tau_multiple = 10;
  o.seed = 31;
  o.threads = 1;
  return o;
}

apsides::SamplerState small_start() {
  apsides::SamplerState s;
  for (int w = 0; w < 8; ++w)
    for (int d = 0; d < 3; ++d) s.positions.push_back(0.1 * apsides::sampler_uniform(5, -1, w, d) - 0.05);
  return s;
}

// Runs (or resumes, when the file exists) up to max_steps; returns the sampler result.
apsides::SamplerResult run_into(const std::string& path, long max_steps, bool resume) {
  apsides::SamplerOptions o = small_run_options();
  o.max_steps = max_steps;
  const apsides::LogDensity f = gaussian3;
  ResultsFile file(path, resume ? ResultsFile::Mode::kReadWrite : ResultsFile::Mode::kCreate);
  apsides::SamplerState start = small_start();
  std::vector<std::vector<double>> rows;
  if (resume) {
    start = file.read_checkpoint();
    for (long s : apsides::diagnostic_steps(start.step, o.diagnostic_rows)) rows.push_back(file.read_chain_row(s));
  } else {
    file.create_chains(o.walkers, 3, o.seed, "test");  // default stride (16)
  }
  WriterObserver obs(file, o.diagnostic_rows);
  return apsides::run_sampler(f, 3, o, start, &obs, resume ? &rows : nullptr);
}
}  // namespace

TEST_SUITE("results_file") {
  TEST_CASE("results_file: a run stopped at any checkpoint and resumed ends where an uninterrupted one does, bitwise") {
    // Stops before, at and after the point where the off-stride diagnostic rows stop being
    // needed (step 264 with diagnostic_rows = 16 and stride 16), and after slots were reused.
    const std::string dir = apsides::test::temp_dir("results_file_resume_points");
    const auto full = run_into(dir + "/full.h5", 6000, false);
    REQUIRE(full.converged());
    REQUIRE(full.steps < 6000);
    ResultsFile ref(dir + "/full.h5", ResultsFile::Mode::kReadOnly);
    CHECK(ref.chain_stride() == apsides::kDefaultChainStride);
    CHECK_FALSE(ref.exists("/chains/state/diagnostic_rows"));  // removed once not needed
    const auto ref_rows = ref.read_chain_rows(16, ref.chain_steps(), 16);
    std::vector<double> ref_lp;
    (void)ref.read_chain_rows(16, ref.chain_steps(), 16, &ref_lp);
    for (long stop : {100L, 250L, 300L, 1000L}) {
      CAPTURE(stop);
      const std::string path = dir + "/stopped_" + std::to_string(stop) + ".h5";
      run_into(path, stop, false);
      {
        ResultsFile mid(path, ResultsFile::Mode::kReadOnly);
        CHECK(mid.chain_steps() == stop);
        // Before step 264 the diagnostics use rows off the stride: they are in the slots.
        CHECK(mid.exists("/chains/state/diagnostic_rows") == (stop < 264));
      }
      const auto resumed = run_into(path, 6000, true);
      CHECK(resumed.steps == full.steps);
      CHECK(resumed.rhat_max == full.rhat_max);
      CHECK(resumed.ess_min == full.ess_min);
      ResultsFile got(path, ResultsFile::Mode::kReadOnly);
      CHECK(got.chain_steps() == ref.chain_steps());
      std::vector<double> lp;
      CHECK(got.read_chain_rows(16, got.chain_steps(), 16, &lp) == ref_rows);
      CHECK(lp == ref_lp);
      CHECK(got.read_vector("/chains/state/positions") == ref.read_vector("/chains/state/positions"));
    }
  }

  TEST_CASE("results_file: stored steps, their selection and an unstored step") {
    const std::string dir = apsides::test::temp_dir("results_file_stride");
    run_into(dir + "/run.h5", 400, false);
    ResultsFile f(dir + "/run.h5", ResultsFile::Mode::kReadOnly);
    CHECK(f.chain_steps() == 400);
    CHECK(f.shape("/chains/positions") == std::vector<std::size_t>{25, 8, 3});
    CHECK(f.read_ints("/chains/step") == [] {
      std::vector<long long> v;
      for (long long s = 16; s <= 400; s += 16) v.push_back(s);
      return v;
    }());
    // After a burn-in of 200 steps: stored steps 208 ... 400, all of them when they fit.
    const auto all = f.select_steps(200, 400, 1000);
    CHECK(all.first == 208);
    CHECK(all.last == 400);
    CHECK(all.stride == 16);
    CHECK(all.rows == 13);
    // At most 50 draws (8 walkers): every 3rd stored step, 5 rows.
    const auto few = f.select_steps(200, 400, 50);
    CHECK(few.stride == 48);
    CHECK(few.rows == 5);
    CHECK(few.rows * 8 <= 50);
    CHECK(f.read_chain_rows(few.first, few.last, few.stride).size() == 5 * 8 * 3);
    CHECK_THROWS_AS(f.read_chain_row(17), apsides::InputError);
    CHECK_THROWS_AS(f.read_chain_rows(1, 400, 1), apsides::InputError);
  }
}
