// Reading velocity files: the 51 Peg archive (639 rows, six instruments) and generated
// comma-separated files of 500 to 8000 rows with a header, an instrument column and four
// indicator columns with errors (every tenth indicator cell empty), read and combined as a
// project does. Files are written before the timed loop; fixed seed.
#include <benchmark/benchmark.h>

#include <cstdio>
#include <filesystem>
#include <fstream>
#include <random>
#include <string>

#include "apsides/data.h"

namespace {

std::string generated_file(int rows) {
  const std::string path =
      (std::filesystem::temp_directory_path() / ("apsides_data_benchmark_" + std::to_string(rows) + ".csv")).string();
  std::mt19937_64 rng(7);
  std::normal_distribution<double> n(0.0, 1.0);
  std::ofstream out(path);
  out << "time,velocity,uncertainty,instrument,fwhm,fwhm_err,bis,bis_err,sindex,sindex_err,halpha,halpha_err\n";
  char line[512];
  for (int i = 0; i < rows; ++i) {
    const double t = 2458000.0 + 0.731 * i + 0.1 * n(rng);
    const bool gap = i % 10 == 3;
    std::snprintf(line, sizeof line, "%.6f,%.4f,%.3f,%s,", t, 5 * n(rng), 1.0 + 0.1 * std::abs(n(rng)),
                  i % 3 == 0 ? "north" : "south");
    out << line;
    for (int k = 0; k < 4; ++k) {
      if (gap) {
        out << (k == 3 ? "," : ",,");
        continue;
      }
      std::snprintf(line, sizeof line, "%.5f,%.5f%s", 7 + n(rng), 0.01 + 0.001 * std::abs(n(rng)), k == 3 ? "" : ",");
      out << line;
    }
    out << "\n";
  }
  return path;
}

void BM_Read51Peg(benchmark::State& state) {
  const std::string path = std::string(APSIDES_SOURCE_DIR) + "/tests/data/real/51peg_rv_birkby2017.txt";
  for (auto _ : state) {
    const apsides::VelocityData d = apsides::load_velocities({path}, {apsides::VelocityFileOptions{}});
    benchmark::DoNotOptimize(d.time_days.data());
  }
  state.SetItemsProcessed(state.iterations() * 639);
}
BENCHMARK(BM_Read51Peg)->Unit(benchmark::kMicrosecond);

void BM_ReadIndicatorFile(benchmark::State& state) {
  const std::string path = generated_file(static_cast<int>(state.range(0)));
  for (auto _ : state) {
    const apsides::VelocityData d = apsides::load_velocities({path}, {apsides::VelocityFileOptions{}});
    benchmark::DoNotOptimize(d.indicators.data());
  }
  state.SetItemsProcessed(state.iterations() * state.range(0));
  state.SetComplexityN(state.range(0));
  std::filesystem::remove(path);
}
BENCHMARK(BM_ReadIndicatorFile)->Arg(500)->Arg(2000)->Arg(8000)->Complexity()->Unit(benchmark::kMicrosecond);

}  // namespace

BENCHMARK_MAIN();
