#include <doctest/doctest.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <sstream>
#include <filesystem>
#include <fstream>
#include <numbers>
#include <random>
#include <string>
#include <vector>

#include "apsides/error.h"
#include "apsides/figures.h"
#include "test_support.h"

using namespace apsides;
namespace fs = std::filesystem;

namespace {

constexpr double kTwoPi = 2.0 * std::numbers::pi;

// Width and height from the PNG IHDR chunk (PNG specification, ISO/IEC 15948, 11.2.2):
// 8-byte signature, then length, "IHDR", width and height as big-endian 32-bit integers.
struct PngSize {
  bool ok = false;
  unsigned width = 0, height = 0;
};
PngSize read_png_size(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  unsigned char b[24] = {};
  in.read(reinterpret_cast<char*>(b), 24);
  PngSize s;
  const unsigned char sig[8] = {0x89, 'P', 'N', 'G', 0x0D, 0x0A, 0x1A, 0x0A};
  if (!in || !std::equal(sig, sig + 8, b) || std::string(reinterpret_cast<char*>(b + 12), 4) != "IHDR") return s;
  s.width = (unsigned(b[16]) << 24) | (unsigned(b[17]) << 16) | (unsigned(b[18]) << 8) | b[19];
  s.height = (unsigned(b[20]) << 24) | (unsigned(b[21]) << 16) | (unsigned(b[22]) << 8) | b[23];
  s.ok = true;
  return s;
}

// Decodes the PNG with an outside decoder (Pillow under /usr/bin/python3) and reports:
// size, number of distinct colours, the fraction of non-white pixels, and whether the
// given RGB colours occur.
struct PngStats {
  bool ok = false;
  int width = 0, height = 0, colours = 0;
  double ink_fraction = 0;
  std::vector<int> found;  // 1 per requested colour found
  std::string raw;
};
PngStats png_stats(const std::string& path, const std::vector<std::array<int, 3>>& wanted) {
  std::string want = "[";
  for (const auto& c : wanted) want += "(" + std::to_string(c[0]) + "," + std::to_string(c[1]) + "," + std::to_string(c[2]) + "),";
  want += "]";
  const std::string code =
      "import numpy as np\n"
      "from PIL import Image\n"
      "im = Image.open(r'" + path + "')\n"
      "a = np.asarray(im.convert('RGB')).astype(np.int32)\n"
      "h, w, _ = a.shape\n"
      "packed = (a[..., 0] << 16) | (a[..., 1] << 8) | a[..., 2]\n"
      "ink = np.count_nonzero(packed != 0xFFFFFF) / packed.size\n"
      "want = " + want + "\n"
      // A colour counts as present when some pixel is within 12 RGB units of it (lines are
      // anti-aliased, so thin ones never show the exact colour).
      "found = [int(np.any(((a - np.array(c)) ** 2).sum(axis=2) <= 144)) for c in want]\n"
      "print(w, h, len(np.unique(packed)), ink, *found)\n";
  const auto r = test::run_python(code);
  PngStats s;
  s.raw = r.output;
  if (r.status != 0) return s;
  std::istringstream in(r.output);
  in >> s.width >> s.height >> s.colours >> s.ink_fraction;
  for (std::size_t i = 0; i < wanted.size(); ++i) {
    int f = 0;
    in >> f;
    s.found.push_back(f);
  }
  s.ok = static_cast<bool>(in);
  return s;
}

std::string read_head(const std::string& path, std::size_t n) {
  std::ifstream in(path, std::ios::binary);
  std::string s(n, '\0');
  in.read(s.data(), static_cast<std::streamsize>(n));
  s.resize(static_cast<std::size_t>(in.gcount()));
  return s;
}

bool no_temp_files(const std::string& dir) {
  for (const auto& e : fs::directory_iterator(dir)) {
    if (e.path().filename().string().find(".tmp-") != std::string::npos) return false;
  }
  return true;
}

// Okabe-Ito blue, vermillion, bluish green: the first three instrument colours.
const std::array<int, 3> kBlue{0, 114, 178}, kVermillion{213, 94, 0}, kGreen{0, 158, 115};

// An invented two-planet system seen by three instruments (fixed seed).
struct Demo {
  std::vector<InstrumentSeries> data, residuals;
  std::vector<double> model_t, model_v;
  double p1 = 12.3, k1 = 9.0, p2 = 85.0, k2 = 4.5, t0 = 2460003.2;
};
Demo make_demo() {
  Demo d;
  std::mt19937_64 rng(42);
  std::normal_distribution<double> noise(0.0, 1.0);
  std::uniform_real_distribution<double> day(0.0, 700.0);
  const char* names[3] = {"north", "south", "archive"};
  const double sig[3] = {1.2, 2.0, 3.5};
  const int n[3] = {70, 45, 30};
  auto model = [&](double t) {
    return d.k1 * std::sin(kTwoPi * (t - d.t0) / d.p1) + d.k2 * std::sin(kTwoPi * (t - d.t0) / d.p2 + 1.0);
  };
  for (int i = 0; i < 3; ++i) {
    InstrumentSeries s, r;
    s.name = r.name = names[i];
    std::vector<double> ts;
    for (int j = 0; j < n[i]; ++j) ts.push_back(2460000.5 + day(rng) * (i == 2 ? 0.5 : 1.0));
    std::sort(ts.begin(), ts.end());
    for (double t : ts) {
      const double e = sig[i] * (0.8 + 0.4 * std::abs(noise(rng)) / 2);
      const double res = e * noise(rng);
      s.time_bjd.push_back(t);
      s.value.push_back(model(t) + res);
      s.error.push_back(e);
      r.time_bjd.push_back(t);
      r.value.push_back(res);
      r.error.push_back(e);
    }
    d.data.push_back(s);
    d.residuals.push_back(r);
  }
  for (int i = 0; i <= 3000; ++i) {
    const double t = 2460000.5 + 700.0 * i / 3000.0;
    d.model_t.push_back(t);
    d.model_v.push_back(model(t));
  }
  return d;
}

// A Schuster periodogram of the demo (enough to give the figure real peaks).
PeriodogramFigureData make_periodogram(const Demo& d) {
  PeriodogramFigureData f;
  std::vector<double> t, y;
  for (const auto& s : d.data) {
    t.insert(t.end(), s.time_bjd.begin(), s.time_bjd.end());
    y.insert(y.end(), s.value.begin(), s.value.end());
  }
  double mean = 0;
  for (double v : y) mean += v / static_cast<double>(y.size());
  double var = 0;
  for (double v : y) var += (v - mean) * (v - mean);
  const int nf = 20000;
  for (int k = 0; k < nf; ++k) {
    const double freq = 1.0 / 1.5 + (1.0 / 700.0 - 1.0 / 1.5) * k / (nf - 1);
    double c = 0, s = 0, wc = 0, ws = 0;
    for (std::size_t i = 0; i < t.size(); ++i) {
      const double ph = kTwoPi * freq * (t[i] - 2460000.0);
      c += (y[i] - mean) * std::cos(ph);
      s += (y[i] - mean) * std::sin(ph);
      wc += std::cos(ph);
      ws += std::sin(ph);
    }
    f.periodogram.period_days.push_back(1.0 / freq);
    f.periodogram.power.push_back(2.0 * (c * c + s * s) / (static_cast<double>(t.size()) * var));
    f.window_period_days.push_back(1.0 / freq);
    f.window_power.push_back((wc * wc + ws * ws) / (static_cast<double>(t.size()) * static_cast<double>(t.size())));
  }
  f.periodogram.fap_levels = {{0.25, "FAP 10%"}, {0.32, "FAP 1%"}, {0.38, "FAP 0.1%"}};
  f.periodogram.peaks = {{12.3, 0, "12.30 d"}, {85.0, 0, "85.0 d"}};
  for (auto& pk : f.periodogram.peaks) {
    double best = 0;
    for (std::size_t k = 0; k < f.periodogram.period_days.size(); ++k) {
      if (std::abs(f.periodogram.period_days[k] / pk.x - 1) < 0.02) best = std::max(best, f.periodogram.power[k]);
    }
    pk.y = best;
  }
  return f;
}

void check_png(const std::string& path, int w, int h, const std::vector<std::array<int, 3>>& colours) {
  INFO(path);
  REQUIRE(fs::exists(path));
  const PngSize sz = read_png_size(path);
  REQUIRE(sz.ok);
  CHECK(sz.width == static_cast<unsigned>(w));
  CHECK(sz.height == static_cast<unsigned>(h));
  const PngStats st = png_stats(path, colours);
  INFO(st.raw);
  REQUIRE(st.ok);
  CHECK(st.width == w);
  CHECK(st.height == h);
  CHECK(st.colours >= 20);            // anti-aliased text, lines and several data colours
  CHECK(st.ink_fraction > 0.01);      // something is drawn ...
  CHECK(st.ink_fraction < 0.6);       // ... on a white background
  for (std::size_t i = 0; i < colours.size(); ++i) {
    INFO("colour " << i);
    CHECK(st.found[i] == 1);
  }
}

}  // namespace

TEST_SUITE("figures") {
  TEST_CASE("figures: formats parse, print and name files") {
    CHECK(parse_figure_format("PNG", "--format") == FigureFormat::kPng);
    CHECK(parse_figure_format("pdf", "--format") == FigureFormat::kPdf);
    CHECK_THROWS_WITH_AS(parse_figure_format("svg", "--format"), "--format = \"svg\": must be \"png\" or \"pdf\"",
                         InputError);
    CHECK(to_string(FigureFormat::kPdf) == "pdf");
    CHECK(figure_path("out/figures", "periodogram", FigureFormat::kPng) == "out/figures/periodogram.png");
    FigureOptions o;
    CHECK(o.Validate().empty());
    o.width_px = 50;
    CHECK(o.Validate() == "width_px = 50: must be in [200, 8000]");
  }

  TEST_CASE("figures: the periodogram with FAP levels and window is a non-blank PNG of the asked size") {
    const std::string dir = test::temp_dir("figures-periodogram");
    const Demo d = make_demo();
    const auto data = make_periodogram(d);
    FigureOptions o;
    o.title = "Periodogram of the velocities";
    const auto f = write_periodogram_figure(data, dir + "/periodogram.png", o);
    CHECK(f.width_px == 1200);
    CHECK(f.height_px == 800);
    // blue: the power; vermillion: the first FAP level.
    check_png(f.path, 1200, 800, {kBlue, kVermillion});
    CHECK(no_temp_files(dir));
  }

  TEST_CASE("figures: residual periodograms of search steps stack in one figure") {
    const std::string dir = test::temp_dir("figures-steps");
    const auto data = make_periodogram(make_demo());
    PeriodogramPanel a = data.periodogram, b = data.periodogram;
    a.title = "Velocities";
    b.title = "Residuals after planet b";
    for (auto& v : b.power) v *= 0.3;
    b.peaks.clear();
    const auto f = write_periodogram_steps_figure({a, b}, dir + "/steps.png");
    check_png(f.path, 1200, 800, {kBlue});
  }

  TEST_CASE("figures: velocities against time show each instrument in its own colour") {
    const std::string dir = test::temp_dir("figures-velocities");
    const Demo d = make_demo();
    TimeSeriesFigureData data;
    data.instruments = d.data;
    data.residuals = d.residuals;
    data.model_time_bjd = d.model_t;
    data.model_value = d.model_v;
    FigureOptions o;
    o.width_px = 1000;
    o.height_px = 700;
    const auto f = write_time_series_figure(data, dir + "/velocities.png", o);
    check_png(f.path, 1000, 700, {kBlue, kVermillion, kGreen});
  }

  TEST_CASE("figures: phase-folded panels, one per planet, with residuals") {
    const std::string dir = test::temp_dir("figures-phase");
    const Demo d = make_demo();
    PhaseFoldFigureData data;
    for (int k = 0; k < 2; ++k) {
      PhaseFoldPanel p;
      p.planet_label = k == 0 ? "b" : "c";
      p.period_days = k == 0 ? d.p1 : d.p2;
      const double amp = k == 0 ? d.k1 : d.k2, shift = k == 0 ? 0.0 : 1.0;
      p.t_ref_bjd = d.t0;
      char sub[64];
      std::snprintf(sub, sizeof sub, "P = %.1f d, K = %.1f m/s", p.period_days, amp);
      p.subtitle = sub;
      for (const auto& s : d.data) {
        InstrumentSeries x = s;
        for (std::size_t i = 0; i < x.value.size(); ++i) {
          // Remove the other planet exactly (the demo's truth).
          const double other = k == 0 ? d.k2 * std::sin(kTwoPi * (x.time_bjd[i] - d.t0) / d.p2 + 1.0)
                                      : d.k1 * std::sin(kTwoPi * (x.time_bjd[i] - d.t0) / d.p1);
          x.value[i] -= other;
        }
        p.data.push_back(x);
      }
      p.residuals = d.residuals;
      for (int i = 0; i <= 400; ++i) {
        const double ph = -0.5 + i / 400.0;
        p.model_phase.push_back(ph);
        p.model_value.push_back(amp * std::sin(kTwoPi * ph + shift));
      }
      data.planets.push_back(p);
    }
    const auto f = write_phase_fold_figure(data, dir + "/phase.png");
    check_png(f.path, 1200, 800, {kBlue, kVermillion, kGreen});
  }
  TEST_CASE("figures: O-C of transit times with error bars and a fitted sinusoid") {
    const std::string dir = test::temp_dir("figures-oc");
    OcFigureData data;
    data.planet_label = "b";
    std::mt19937_64 rng(7);
    std::normal_distribution<double> noise(0.0, 1.0);
    for (int n = 0; n < 40; ++n) {
      if (n % 7 == 3) continue;  // missed transits
      const double ttv = 0.002 * std::sin(kTwoPi * n / 17.0);
      data.epoch.push_back(n);
      data.o_minus_c_days.push_back(ttv + 0.0006 * noise(rng));
      data.error_days.push_back(0.0006);
    }
    for (int i = 0; i <= 400; ++i) {
      const double n = 39.0 * i / 400.0;
      data.curve_epoch.push_back(n);
      data.curve_o_minus_c_days.push_back(0.002 * std::sin(kTwoPi * n / 17.0));
    }
    const auto f = write_oc_figure(data, dir + "/oc.png");
    check_png(f.path, 1200, 800, {kBlue, kVermillion});
  }

  TEST_CASE("figures: corner plot of four correlated parameters with truths") {
    const std::string dir = test::temp_dir("figures-corner");
    std::mt19937_64 rng(11);
    std::normal_distribution<double> g(0.0, 1.0);
    CornerFigureData data;
    data.parameters = {{"Period [d]", {}, 12.3}, {"K [m/s]", {}, 9.0}, {"√e cos ω", {}, 0.1}, {"√e sin ω", {}, -0.05}};
    for (int i = 0; i < 20000; ++i) {
      const double a = g(rng), b = g(rng), c = g(rng), e = g(rng);
      data.parameters[0].samples.push_back(12.3 + 0.004 * a);
      data.parameters[1].samples.push_back(9.0 + 0.4 * (0.7 * a + 0.71 * b));
      data.parameters[2].samples.push_back(0.1 + 0.08 * c);
      data.parameters[3].samples.push_back(-0.05 + 0.08 * (0.5 * c + 0.87 * e));
    }
    FigureOptions o;
    o.width_px = 1000;
    o.height_px = 1000;
    const auto f = write_corner_figure(data, dir + "/corner.png", o);
    check_png(f.path, 1000, 1000, {kBlue, kVermillion});
  }

  TEST_CASE("figures: trace plots of several walkers with the burn-in marked") {
    const std::string dir = test::temp_dir("figures-trace");
    std::mt19937_64 rng(5);
    std::normal_distribution<double> g(0.0, 1.0);
    TraceFigureData data;
    data.labels = {"Period [d]", "K [m/s]", "Jitter [m/s]"};
    data.n_steps = 1500;
    data.n_walkers = 24;
    data.burn_in_step = 300;
    const double target[3] = {12.3, 9.0, 1.5}, width[3] = {0.004, 0.4, 0.3};
    std::vector<double> x(24 * 3);
    for (std::size_t w = 0; w < 24; ++w) {
      for (int p = 0; p < 3; ++p) x[w * 3 + p] = target[p] + 20 * width[p] * g(rng);
    }
    for (std::size_t s = 0; s < data.n_steps; ++s) {
      for (std::size_t w = 0; w < 24; ++w) {
        for (int p = 0; p < 3; ++p) {
          double& v = x[w * 3 + p];
          v += 0.02 * (target[p] - v) + 0.2 * width[p] * g(rng);  // relaxes to the target
          data.chain.push_back(v);
        }
      }
    }
    const auto f = write_trace_figure(data, dir + "/trace.png");
    check_png(f.path, 1200, 800, {kBlue, kVermillion, kGreen});
  }

  TEST_CASE("figures: PDF output is a PDF with the asked page size") {
    const std::string dir = test::temp_dir("figures-pdf");
    const Demo d = make_demo();
    TimeSeriesFigureData data;
    data.instruments = d.data;
    data.model_time_bjd = d.model_t;
    data.model_value = d.model_v;
    FigureOptions o;
    o.format = FigureFormat::kPdf;
    const auto f = write_time_series_figure(data, figure_path(dir, "velocities", o.format), o);
    CHECK(f.path == dir + "/velocities.pdf");
    CHECK(read_head(f.path, 5) == "%PDF-");
    // 1200 x 800 px at 96 per inch = 900 x 600 pt; the PDF's MediaBox says so.
    const auto r = test::run_python("import re\nb = open(r'" + f.path +
                                    "', 'rb').read()\nm = re.search(rb'/MediaBox *\\[ *([0-9. ]+)\\]', b)\n"
                                    "print(' '.join(str(round(float(v))) for v in m.group(1).split()))\n");
    CHECK(r.output == "0 0 900 600\n");
    CHECK(no_temp_files(dir));
  }

  TEST_CASE("figures: bad input is an InputError and writes nothing") {
    const std::string dir = test::temp_dir("figures-bad");
    const std::string out = dir + "/x.png";
    SUBCASE("empty data") {
      CHECK_THROWS_WITH_AS(write_time_series_figure({}, out), "velocity figure: no data points; it needs at least 1",
                           InputError);
      CHECK_THROWS_WITH_AS(write_oc_figure({}, out), "O−C figure: no transits; it needs at least 1", InputError);
      CHECK_THROWS_WITH_AS(write_corner_figure({}, out), "corner figure: no parameters; it needs at least 1", InputError);
      CHECK_THROWS_WITH_AS(write_phase_fold_figure({}, out), "phase-folded figure: no planets; it needs at least 1",
                           InputError);
      CHECK_THROWS_AS(write_periodogram_figure({}, out), InputError);
      CHECK_THROWS_AS(write_trace_figure({}, out), InputError);
      CHECK_THROWS_AS(write_periodogram_steps_figure({}, out), InputError);
    }
    SUBCASE("NaN and mismatched sizes") {
      TimeSeriesFigureData data;
      data.instruments = {{"north", {1.0, 2.0, 3.0}, {1.0, std::nan(""), 2.0}, {}}};
      CHECK_THROWS_WITH_AS(write_time_series_figure(data, out),
                           "velocity figure: instruments 'north'.value[1] is nan; it must be finite", InputError);
      data.instruments = {{"north", {1.0, 2.0, 3.0}, {1.0, 2.0}, {}}};
      CHECK_THROWS_WITH_AS(write_time_series_figure(data, out),
                           "velocity figure: instruments 'north'.value has 2 values; it must have as many as time_bjd (3)",
                           InputError);
      PeriodogramFigureData p;
      p.periodogram.period_days = {1.0, -2.0, 3.0};
      p.periodogram.power = {0.1, 0.2, 0.3};
      CHECK_THROWS_WITH_AS(write_periodogram_figure(p, out),
                           "periodogram figure: periodogram.period_days[1] is -2; it must be > 0", InputError);
      TraceFigureData t;
      t.labels = {"a"};
      t.n_steps = 3;
      t.n_walkers = 2;
      t.chain = {1, 2, 3, 4, 5};
      CHECK_THROWS_WITH_AS(write_trace_figure(t, out),
                           "trace figure: chain has 5 values; it must have n_steps × n_walkers × parameters = 3 × 2 × 1 = 6",
                           InputError);
      CornerFigureData c;
      c.parameters = {{"a", std::vector<double>(20, 1.0), std::nan("")}, {"b", std::vector<double>(19, 1.0), std::nan("")}};
      CHECK_THROWS_WITH_AS(write_corner_figure(c, out),
                           "corner figure: parameters[1] 'b'.samples has 19 values; it must have as many as "
                           "parameters[0].samples (20)",
                           InputError);
    }
    SUBCASE("unwritable path and bad options") {
      TimeSeriesFigureData data;
      data.instruments = {{"north", {1.0, 2.0, 3.0}, {1.0, 2.0, 1.5}, {}}};
      CHECK_THROWS_WITH_AS(write_time_series_figure(data, dir + "/missing/x.png"),
                           (dir + "/missing/x.png: directory " + dir + "/missing does not exist").c_str(), InputError);
      CHECK_THROWS_WITH_AS(write_time_series_figure(data, dir), (dir + ": is a directory").c_str(), InputError);
      TimeSeriesFigureData huge;
      huge.instruments = {{"north", {1.0, 2.0, 3.0}, {1e308, -1e308, 0.0}, {}}};
      CHECK_THROWS_AS(write_time_series_figure(huge, out), InputError);
      FigureOptions o;
      o.height_px = 9000;
      CHECK_THROWS_WITH_AS(write_time_series_figure(data, out, o),
                           "figure options: height_px = 9000: must be in [200, 8000]", InputError);
    }
    CHECK_FALSE(fs::exists(out));
    CHECK(no_temp_files(dir));
  }

  TEST_CASE("figures: a failed redraw leaves the previous file untouched") {
    const std::string dir = test::temp_dir("figures-atomic");
    TimeSeriesFigureData data;
    data.instruments = {{"north", {1.0, 2.0, 3.0}, {1.0, 2.0, 1.5}, {0.1, 0.1, 0.1}}};
    const std::string out = dir + "/v.png";
    write_time_series_figure(data, out);
    const auto before = fs::file_size(out);
    data.instruments[0].value[2] = INFINITY;
    CHECK_THROWS_AS(write_time_series_figure(data, out), InputError);
    CHECK(fs::file_size(out) == before);
    CHECK(read_png_size(out).ok);
    CHECK(no_temp_files(dir));
  }

  TEST_CASE("figures: degenerate but valid data (one point, constant samples) still draws") {
    const std::string dir = test::temp_dir("figures-degenerate");
    TimeSeriesFigureData one;
    one.instruments = {{"north", {2460100.25}, {3.0}, {}}};
    CHECK_NOTHROW(write_time_series_figure(one, dir + "/one.png"));
    CHECK(read_png_size(dir + "/one.png").width == 1200);
    CornerFigureData c;
    c.parameters = {{"fixed [m/s]", std::vector<double>(50, 2.0), 2.0}, {"free", {}, std::nan("")}};
    for (int i = 0; i < 50; ++i) c.parameters[1].samples.push_back(i);
    CHECK_NOTHROW(write_corner_figure(c, dir + "/corner.png"));
    OcFigureData oc;
    oc.epoch = {0};
    oc.o_minus_c_days = {0};
    oc.error_days = {0.001};
    CHECK_NOTHROW(write_oc_figure(oc, dir + "/oc.png"));
    CHECK(no_temp_files(dir));
  }
}
