// Limits and surveys over threads and MPI ranks (parallel.h, limits.h, survey.h): the
// same bytes for any split, a killed survey resumed, a failing star failing alone.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <chrono>
#include <filesystem>
#include <thread>

#include "apsides/error.h"
#include "apsides/parallel.h"
#include "apsides/survey.h"
#include "test_support.h"

using namespace apsides;
namespace fs = std::filesystem;

namespace {

std::string demo_project() { return test::source_dir() + "/datasets_synthetic/demo/project.toml"; }

bool have_mpirun() {
  if (!ParallelSession::mpi_built()) {
    MESSAGE("SKIPPED: apsides was built without MPI (APSIDES_MPI=OFF or no Open MPI found)");
    return false;
  }
  if (test::run_command("command -v mpirun >/dev/null 2>&1").status != 0) {
    MESSAGE("SKIPPED: no mpirun on PATH (Debian: openmpi-bin)");
    return false;
  }
  return true;
}

std::string mpirun(int n) { return fmt::format("mpirun -n {} --allow-run-as-root --oversubscribe ", n); }

// A catalog listing the demo project `n` times under different names, and a missing one.
std::string catalog(const std::string& dir, int n) {
  std::string text = "stages = \"scan,search\"\n";
  for (int i = 0; i < n; ++i) text += fmt::format("[[star]]\nproject = \"{}\"\nname = \"Vireo-{}\"\n", demo_project(), i);
  text += "[[star]]\nproject = \"nowhere/project.toml\"\nname = \"Ghost-1\"\n";
  return test::write_text(dir, "catalog.toml", text);
}

}  // namespace

TEST_SUITE("parallel") {

TEST_CASE("limits under mpirun with 1, 2 and 3 ranks write the same bytes as a plain run") {
  if (!have_mpirun()) return;
  const std::string dir = test::temp_dir("parallel_limits");
  const std::string args = fmt::format("limits {} --period-cells 3 --mass-cells 2 --injections 2 --seed 4 -q --out ", demo_project());
  const auto plain = test::run_command(fmt::format("{} {}{}/plain --threads 2", test::apsides_binary(), args, dir));
  REQUIRE(plain.status == 0);
  const std::string reference = test::read_file(dir + "/plain/limits.json");
  REQUIRE(!reference.empty());
  for (int n : {1, 2, 3}) {
    CAPTURE(n);
    const auto r = test::run_command(fmt::format("{}{} {}{}/n{}", mpirun(n), test::apsides_binary(), args, dir, n));
    CHECK(r.status == 0);
    CHECK(test::read_file(fmt::format("{}/n{}/limits.json", dir, n)) == reference);
  }
}

TEST_CASE("a survey killed mid-run (kill -9 of mpirun) and resumed ends with the uninterrupted survey.csv") {
  if (!have_mpirun()) return;
  const std::string dir = test::temp_dir("parallel_survey");
  const std::string cat = catalog(dir, 6);
  const std::string bin = test::apsides_binary();
  const auto whole = test::run_command(fmt::format("{}{} survey {} --out {}/whole -q", mpirun(2), bin, cat, dir));
  CHECK(whole.status != 0);  // one star fails: exit 1 (mpirun passes on a non-zero code)
  const std::string reference = test::read_file(dir + "/whole/survey.csv");
  REQUIRE(reference.find("Ghost-1") != std::string::npos);
  CHECK(reference.find("failed") != std::string::npos);
  CHECK(reference.find("Vireo-5,2,c") != std::string::npos);  // the failing star did not stop the others

  // Start, wait for the first finished stars, kill -9 the launcher (its ranks die with it).
  const std::string out = dir + "/killed";
  const auto bg = test::run_command(fmt::format("({}{} survey {} --out {} -q >/dev/null 2>&1 & echo $!)", mpirun(2), bin, cat, out));
  const std::string pid = bg.output.substr(0, bg.output.find('\n'));
  auto finished = [&] {
    int k = 0;
    if (fs::exists(out + "/stars"))
      for (const auto& e : fs::directory_iterator(out + "/stars")) k += fs::exists(e.path() / "star.json");
    return k;
  };
  for (int i = 0; i < 600 && finished() < 2; ++i) std::this_thread::sleep_for(std::chrono::milliseconds(50));
  test::run_command("kill -9 " + pid);
  std::this_thread::sleep_for(std::chrono::milliseconds(500));
  const int before = finished();
  MESSAGE(fmt::format("{} of 7 stars finished when mpirun was killed", before));
  CHECK(before < 7);
  CHECK(!fs::exists(out + "/survey.csv"));
  const auto resumed = test::run_command(fmt::format("{}{} survey {} --out {} --resume -q", mpirun(2), bin, cat, out));
  CHECK(resumed.output.find("reused") != std::string::npos);
  CHECK(test::read_file(out + "/survey.csv") == reference);
}

TEST_CASE("a survey on threads: a failing star fails alone, --resume reuses finished stars, bad catalogs are input errors") {
  const std::string dir = test::temp_dir("parallel_threads");
  const SurveyCatalog c = load_catalog(catalog(dir, 2));
  REQUIRE(c.stars.size() == 3);
  SurveyOptions o;
  o.out_dir = dir + "/out";
  o.stages = SurveyStages::kScanSearch;
  o.threads = 2;
  const SurveyResult r = run_survey(c, o);
  CHECK(r.failed == 1);
  CHECK(r.records[2].status == "failed");
  CHECK(r.records[2].error.find("no such file") != std::string::npos);
  // The demo star's two planets (truth: datasets_synthetic/demo/scenario.toml, 6.4127 d and 118.6 d).
  REQUIRE(r.records[0].planets.size() == 2);
  CHECK(r.records[0].planets[0].period_d == doctest::Approx(6.4127).epsilon(1e-3));
  CHECK(r.records[0].planets[1].period_d == doctest::Approx(118.6).epsilon(1e-2));
  const std::string csv = test::read_file(o.out_dir + "/survey.csv");
  o.resume = true;
  const SurveyResult again = run_survey(c, o);
  CHECK(again.reused == 3);
  CHECK(test::read_file(o.out_dir + "/survey.csv") == csv);
  CHECK(fs::exists(o.out_dir + "/figures/population.png"));

  CHECK_THROWS_AS(load_catalog(dir + "/none.toml"), InputError);
  CHECK_THROWS_AS(load_catalog(test::write_text(dir, "empty.toml", "stages = \"scan\"\n")), InputError);
  CHECK_THROWS_AS(load_catalog(test::write_text(dir, "typo.toml", "[[star]]\nprojekt = \"a.toml\"\n")), InputError);
}

}  // TEST_SUITE
