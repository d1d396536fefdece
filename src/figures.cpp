// Figures with PLplot's cairo devices. See include/apsides/figures.h for the contract.
//
// PLplot calls exit() on some errors and keeps global state, so: every input is checked
// here before PLplot sees it, all drawing holds one mutex, and each figure gets its own
// plstream that is ended before the file is renamed into place.
#include "apsides/figures.h"

#include <plplot/plstream.h>

#include <algorithm>
#include <array>
#include <cctype>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <map>
#include <memory>
#include <mutex>
#include <numeric>
#include <unistd.h>

#include <fmt/format.h>

#include "apsides/error.h"
#include "apsides/stability_analysis.h"

namespace apsides {

namespace fs = std::filesystem;

std::string to_string(FigureFormat f) { return f == FigureFormat::kPdf ? "pdf" : "png"; }

FigureFormat parse_figure_format(const std::string& text, const std::string& where) {
  std::string t = text;
  std::transform(t.begin(), t.end(), t.begin(), [](unsigned char c) { return std::tolower(c); });
  if (t == "png") return FigureFormat::kPng;
  if (t == "pdf") return FigureFormat::kPdf;
  throw InputError(fmt::format("{} = \"{}\": must be \"png\" or \"pdf\"", where, text));
}

std::string figure_extension(FigureFormat f) { return "." + to_string(f); }

std::string figure_path(const std::string& dir, const std::string& stem, FigureFormat format) {
  return (fs::path(dir) / (stem + figure_extension(format))).string();
}

std::string FigureOptions::Validate() const {
  if (width_px < 200 || width_px > 8000) return fmt::format("width_px = {}: must be in [200, 8000]", width_px);
  if (height_px < 200 || height_px > 8000) return fmt::format("height_px = {}: must be in [200, 8000]", height_px);
  if (!(font_scale > 0.2 && font_scale <= 5.0)) return fmt::format("font_scale = {}: must be in (0.2, 5]", font_scale);
  return "";
}

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::mutex& plplot_mutex() {
  static std::mutex m;
  return m;
}

// Colour map 0. Okabe & Ito (2008) for data; inks and greys for the frame.
enum Colour : int {
  kWhite = 0, kInk, kGrid, kMuted, kBlue, kVermillion, kGreen, kOrange, kPurple, kSky,
  kBlack, kYellow, kPale, kBlueFaint, kVermillionFaint, kNumColours
};
constexpr std::array<std::array<int, 3>, kNumColours> kRgb{{
    {255, 255, 255},  // white background
    {34, 34, 34},     // ink: frame, labels
    {226, 226, 226},  // grid
    {120, 120, 120},  // muted text, window function
    {0, 114, 178},    // Okabe-Ito blue
    {213, 94, 0},     // vermillion
    {0, 158, 115},    // bluish green
    {230, 159, 0},    // orange
    {204, 121, 167},  // reddish purple
    {86, 180, 233},   // sky blue
    {0, 0, 0},        // black
    {240, 228, 66},   // yellow
    {238, 238, 238},  // pale fill (burn-in region)
    {190, 220, 238},  // faint blue (histogram fill)
    {213, 94, 0},     // vermillion, drawn translucent
}};

// Instruments: colour AND marker shape, so they stay apart in greyscale.
constexpr std::array<int, 8> kSeriesColour{kBlue, kVermillion, kGreen, kOrange, kPurple, kSky, kBlack, kYellow};
constexpr std::array<const char*, 8> kSeriesMarker{"●", "■", "▲", "◆", "▼", "★", "✚", "✖"};

// Walkers in trace plots: a repeating cycle (walkers are not categories).
constexpr std::array<int, 6> kWalkerColour{kBlue, kVermillion, kGreen, kOrange, kPurple, kSky};

// PLplot's text escape character is '#'.
std::string esc(const std::string& s) {
  std::string out;
  out.reserve(s.size());
  for (char c : s) {
    out += c;
    if (c == '#') out += '#';
  }
  return out;
}

// Code points in a UTF-8 string (for text-width estimates).
std::size_t utf8_length(const std::string& s) {
  std::size_t n = 0;
  for (unsigned char c : s) n += (c & 0xC0) != 0x80;
  return n;
}

// ---------------------------------------------------------------------------------------
// Input checks. Messages: "<figure>: <field> ...: must be ...".

void require(bool ok, const std::string& figure, const std::string& what) {
  if (!ok) throw InputError(figure + ": " + what);
}

void check_finite(const std::string& figure, const std::string& field, const std::vector<double>& v) {
  for (std::size_t i = 0; i < v.size(); ++i) {
    if (!std::isfinite(v[i])) {
      throw InputError(fmt::format("{}: {}[{}] is {}; it must be finite", figure, field, i, v[i]));
    }
  }
}

void check_same_size(const std::string& figure, const std::string& field, const std::vector<double>& v,
                     const std::string& ref_field, std::size_t n) {
  if (v.size() != n) {
    throw InputError(fmt::format("{}: {} has {} values; it must have as many as {} ({})", figure, field,
                                 v.size(), ref_field, n));
  }
}

void check_positive(const std::string& figure, const std::string& field, const std::vector<double>& v) {
  for (std::size_t i = 0; i < v.size(); ++i) {
    if (!(v[i] > 0.0)) throw InputError(fmt::format("{}: {}[{}] is {}; it must be > 0", figure, field, i, v[i]));
  }
}

void check_series(const std::string& figure, const std::string& field, const InstrumentSeries& s) {
  const std::string f = field + " '" + s.name + "'";
  check_same_size(figure, f + ".value", s.value, "time_bjd", s.time_bjd.size());
  if (!s.error.empty()) {
    check_same_size(figure, f + ".error", s.error, "time_bjd", s.time_bjd.size());
    check_finite(figure, f + ".error", s.error);
    for (std::size_t i = 0; i < s.error.size(); ++i) {
      if (s.error[i] < 0) throw InputError(fmt::format("{}: {}.error[{}] is {}; it must be >= 0", figure, f, i, s.error[i]));
    }
  }
  check_finite(figure, f + ".time_bjd", s.time_bjd);
  check_finite(figure, f + ".value", s.value);
}

void check_curve(const std::string& figure, const std::string& xf, const std::vector<double>& x,
                 const std::string& yf, const std::vector<double>& y) {
  check_same_size(figure, yf, y, xf, x.size());
  check_finite(figure, xf, x);
  check_finite(figure, yf, y);
}

void check_options(const FigureOptions& o) {
  const std::string v = o.Validate();
  if (!v.empty()) throw InputError("figure options: " + v);
}

// ---------------------------------------------------------------------------------------
// Ranges.

struct Range {
  double lo = std::numeric_limits<double>::infinity();
  double hi = -std::numeric_limits<double>::infinity();
  void add(double v) {
    if (!std::isfinite(v)) return;
    lo = std::min(lo, v);
    hi = std::max(hi, v);
  }
  void add(const std::vector<double>& v) {
    for (double x : v) add(x);
  }
  bool empty() const { return !(hi >= lo); }
  // Widened by `frac` of the span on both sides; a zero span gets a sensible width.
  Range padded(double frac) const {
    Range r = *this;
    if (r.empty()) return Range{0.0, 1.0};
    double span = r.hi - r.lo;
    if (!(span > 1e-12 * std::max(1.0, std::abs(r.hi)))) {
      const double half = std::abs(r.lo) > 0 ? 0.05 * std::abs(r.lo) : 0.5;
      return Range{r.lo - half, r.hi + half};
    }
    r.lo -= frac * span;
    r.hi += frac * span;
    return r;
  }
};

// Keeps at most ~2 points per output column (min and max in each), so a million-point
// periodogram draws quickly but keeps every peak. x must be monotonic.
void decimate(const std::vector<double>& x, const std::vector<double>& y, std::size_t columns,
              std::vector<double>& ox, std::vector<double>& oy) {
  ox.clear();
  oy.clear();
  const std::size_t n = x.size();
  if (n <= 4 * columns || n < 2) {
    ox = x;
    oy = y;
    return;
  }
  const double x0 = x.front(), x1 = x.back();
  const double span = x1 - x0;
  std::size_t i = 0;
  while (i < n) {
    const auto col = static_cast<std::size_t>(std::min<double>(
        static_cast<double>(columns - 1), std::floor((x[i] - x0) / span * static_cast<double>(columns))));
    std::size_t j = i, imin = i, imax = i;
    while (j < n) {
      const auto c = static_cast<std::size_t>(std::min<double>(
          static_cast<double>(columns - 1), std::floor((x[j] - x0) / span * static_cast<double>(columns))));
      if (c != col) break;
      if (y[j] < y[imin]) imin = j;
      if (y[j] > y[imax]) imax = j;
      ++j;
    }
    const std::size_t a = std::min(imin, imax), b = std::max(imin, imax);
    ox.push_back(x[a]);
    oy.push_back(y[a]);
    if (b != a) {
      ox.push_back(x[b]);
      oy.push_back(y[b]);
    }
    i = j;
  }
}

double quantile_sorted(const std::vector<double>& s, double q) {
  if (s.empty()) return kNaN;
  const double pos = q * static_cast<double>(s.size() - 1);
  const auto i = static_cast<std::size_t>(std::floor(pos));
  const double f = pos - static_cast<double>(i);
  if (i + 1 >= s.size()) return s.back();
  return s[i] * (1 - f) + s[i + 1] * f;
}

// A round tick interval (1, 2 or 5 times a power of ten) giving about `n` ticks over `span`.
double nice_step(double span, double n) {
  if (!(span > 0) || !std::isfinite(span)) return 0.0;
  const double raw = span / n;
  const double mag = std::pow(10.0, std::floor(std::log10(raw)));
  const double f = raw / mag;
  return (f < 1.5 ? 1.0 : f < 3.0 ? 2.0 : f < 7.0 ? 5.0 : 10.0) * mag;
}

// "12.34 +0.05 −0.04": the value to the precision of its smaller error (2 significant digits).
std::string format_with_errors(double median, double minus, double plus) {
  const double err = std::min(minus, plus);
  int decimals = 2;
  if (err > 0 && std::isfinite(err)) decimals = std::clamp(1 - static_cast<int>(std::floor(std::log10(err))), 0, 8);
  if (std::abs(median) >= 1e6 || (std::abs(median) < 1e-4 && median != 0)) {
    return fmt::format("{:.3g} +{:.2g} −{:.2g}", median, plus, minus);
  }
  return fmt::format("{:.{}f} +{:.{}f} −{:.{}f}", median, decimals, plus, decimals, minus, decimals);
}

// ---------------------------------------------------------------------------------------
// One figure being drawn: owns the plstream and the temporary file.

struct Viewport {  // normalised device coordinates of a plot area
  double x0, x1, y0, y1;
};

class Canvas {
 public:
  Canvas(const std::string& path, const FigureOptions& options, std::string figure)
      : path_(path), options_(options), figure_(std::move(figure)) {
    check_options(options);
    require(!path.empty(), figure_, "output path is empty");
    const fs::path target(path);
    std::error_code ec;
    const fs::path parent = target.has_parent_path() ? target.parent_path() : fs::path(".");
    if (!fs::is_directory(parent, ec)) {
      throw InputError(fmt::format("{}: directory {} does not exist", path, parent.string()));
    }
    if (fs::is_directory(target, ec)) throw InputError(fmt::format("{}: is a directory", path));
    tmp_ = (parent / fmt::format(".{}.tmp-{}", target.filename().string(), getpid())).string();
    {
      std::ofstream probe(tmp_, std::ios::binary | std::ios::trunc);
      if (!probe) throw InputError(fmt::format("{}: cannot be written", path));
    }
    pls_ = std::make_unique<plstream>();
    pls_->sdev(options.format == FigureFormat::kPdf ? "pdfcairo" : "pngcairo");
    pls_->sfnam(tmp_.c_str());
    if (options.format == FigureFormat::kPdf) {
      // pdfcairo counts in points (72 per inch): our pixels at 96 per inch.
      pls_->spage(0, 0, static_cast<PLINT>(std::lround(options.width_px * 0.75)),
                  static_cast<PLINT>(std::lround(options.height_px * 0.75)), 0, 0);
    } else {
      pls_->spage(0, 0, options.width_px, options.height_px, 0, 0);
    }
    std::array<PLINT, kNumColours> r{}, g{}, b{};
    for (int i = 0; i < kNumColours; ++i) {
      r[i] = kRgb[i][0];
      g[i] = kRgb[i][1];
      b[i] = kRgb[i][2];
    }
    pls_->scmap0(r.data(), g.data(), b.data(), kNumColours);
    pls_->init();
    // Plain numbers on the axes rather than a separate "(x10^n)" factor that can land on a
    // neighbouring panel.
    pls_->sxax(10, 0);
    pls_->syax(10, 0);
    pls_->scol0a(kVermillionFaint, kRgb[kVermillion][0], kRgb[kVermillion][1], kRgb[kVermillion][2], 0.6);
    pls_->adv(0);
    PLFLT xmin, xmax, ymin, ymax;
    pls_->gspa(xmin, xmax, ymin, ymax);
    page_w_mm_ = xmax - xmin;
    page_h_mm_ = ymax - ymin;
    // PLplot's default text height is proportional to the page; 0.62 of it reads well at
    // 1200 x 800. Small images get relatively larger text so it stays legible.
    const double size = std::sqrt(options.width_px * options.height_px / (1200.0 * 800.0));
    text_scale_ = 0.62 * options.font_scale * std::max(1.0, 0.85 / size);
    set_text(1.0);
  }

  ~Canvas() {
    if (pls_) pls_.reset();
    std::error_code ec;
    if (!finished_) fs::remove(tmp_, ec);
  }

  Canvas(const Canvas&) = delete;
  Canvas& operator=(const Canvas&) = delete;

  plstream& p() { return *pls_; }

  // Text size relative to the figure's body text.
  void set_text(double rel) {
    current_rel_ = rel;
    pls_->schr(0, text_scale_ * rel);
    PLFLT def, ht;
    pls_->gchr(def, ht);
    char_h_mm_ = ht;
  }
  double char_h_mm() const { return char_h_mm_; }
  // The largest relative size (<= rel_max) at which `text` fits in `avail` (NDC width, or
  // height for text along a vertical axis).
  double fit_rel(const std::string& text, double avail, bool vertical, double rel_max) const {
    const double unit = char_h_mm_ / (vertical ? page_h_mm_ : page_w_mm_) / current_rel_;
    const double need = 0.72 * unit * static_cast<double>(std::max<std::size_t>(1, utf8_length(text)));
    return std::min(rel_max, avail / need);
  }
  // One character height as a fraction of page width / height.
  double cw() const { return char_h_mm_ / page_w_mm_; }
  double ch() const { return char_h_mm_ / page_h_mm_; }
  double page_aspect() const { return page_w_mm_ / page_h_mm_; }
  int width_px() const { return options_.width_px; }
  // Line width scaled with the figure size.
  double lw(double w) const { return w * std::clamp(std::sqrt(options_.width_px * options_.height_px / (1200.0 * 800.0)), 0.6, 2.5); }

  // The title line at the top of the page; returns the NDC y below it.
  double title(const std::string& text) {
    if (text.empty()) return 1.0 - 0.6 * ch();
    full_page();
    set_text(1.25);
    pls_->col0(kInk);
    pls_->ptex(0.5, 1.0 - 1.6 * ch(), 1, 0, 0.5, esc(text).c_str());
    const double below = 1.0 - 2.6 * ch();
    set_text(1.0);
    return below;
  }

  void full_page() {
    pls_->vpor(0, 1, 0, 1);
    pls_->wind(0, 1, 0, 1);
  }

  // A legend row of markers/lines with labels, centred at NDC height y.
  struct LegendEntry {
    std::string label;
    int colour = kInk;
    const char* marker = nullptr;  // glyph; nullptr = line
    int line_style = 1;
    double line_width = 2.0;
  };
  void legend_row(const std::vector<LegendEntry>& entries, double y) {
    if (entries.empty()) return;
    full_page();
    set_text(0.95);
    const double char_w = 0.70 * cw();  // average glyph width of DejaVu Sans, in NDC
    const double sym_w = 2.6 * cw();
    const double gap = 2.2 * cw();
    double total = 0;
    for (const auto& e : entries) total += sym_w + char_w * static_cast<double>(utf8_length(e.label)) + gap;
    total -= gap;
    double x = std::max(0.02, 0.5 - total / 2);
    for (const auto& e : entries) {
      if (e.marker) {
        pls_->col0(e.colour);
        PLFLT px = x + sym_w * 0.35, py = y - 0.12 * ch();
        pls_->string(1, &px, &py, e.marker);
      } else {
        pls_->col0(e.colour);
        pls_->lsty(e.line_style);
        pls_->width(lw(e.line_width));
        PLFLT lx[2] = {x, x + sym_w * 0.8}, ly[2] = {y, y};
        pls_->line(2, lx, ly);
        pls_->lsty(1);
      }
      pls_->col0(kInk);
      pls_->ptex(x + sym_w, y - 0.35 * ch(), 1, 0, 0, esc(e.label).c_str());
      x += sym_w + char_w * static_cast<double>(utf8_length(e.label)) + gap;
    }
    set_text(1.0);
  }

  // Sets viewport and window; log10 world x when `log_x`.
  void panel(const Viewport& v, double wx0, double wx1, double wy0, double wy1) {
    // Finite inputs can still overflow a span (values near 1e308): refuse rather than let
    // PLplot see an infinite window.
    if (!std::isfinite(wx0) || !std::isfinite(wx1) || !std::isfinite(wy0) || !std::isfinite(wy1) ||
        !std::isfinite(wx1 - wx0) || !std::isfinite(wy1 - wy0)) {
      throw InputError(fmt::format("{}: values too large to draw (axis range [{}, {}] x [{}, {}])", figure_, wx0,
                                   wx1, wy0, wy1));
    }
    pls_->vpor(v.x0, v.x1, v.y0, v.y1);
    pls_->wind(wx0, wx1, wy0, wy1);
  }

  // Light grid, then frame, ticks and (optionally) numeric labels.
  void axes(bool x_numbers, bool y_numbers, bool log_x = false, bool grid = true, double xtick = 0,
            double ytick = 0, double number_rel = 0.9) {
    const std::string lx = log_x ? "l" : "";
    pls_->width(lw(1.0));
    pls_->lsty(1);
    if (grid) {
      pls_->col0(kGrid);
      pls_->box(("g" + lx).c_str(), xtick, 0, "g", ytick, 0);
    }
    pls_->col0(kInk);
    pls_->smaj(0, 0.9);
    pls_->smin(0, 0.9);
    // Log axes get their numbers from log_numbers(): PLplot would label decades only.
    const std::string xo = "bcst" + lx + (x_numbers && !log_x ? "n" : "");
    const std::string yo = std::string("bcstv") + (y_numbers ? "n" : "");
    set_text(number_rel);
    pls_->box(xo.c_str(), xtick, 0, yo.c_str(), ytick, 0);
    if (log_x && x_numbers) log_numbers();
    set_text(1.0);
  }

  // Numbers 1, 2, 5 x 10^k under a log10 x axis (only 1 x 10^k when that would crowd).
  void log_numbers() {
    PLFLT x0, x1, y0, y1;
    pls_->gvpw(x0, x1, y0, y1);
    std::vector<double> values;
    auto collect = [&](std::initializer_list<double> mantissas) {
      values.clear();
      for (int k = static_cast<int>(std::floor(x0)) - 1; k <= static_cast<int>(std::ceil(x1)); ++k) {
        for (double m : mantissas) {
          const double v = m * std::pow(10.0, k);
          if (std::log10(v) >= x0 && std::log10(v) <= x1) values.push_back(v);
        }
      }
    };
    collect({1.0, 2.0, 5.0});
    if (values.size() < 3) collect({1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0});
    if (values.size() > 12) {
      values.erase(std::remove_if(values.begin(), values.end(),
                                  [](double v) { return std::abs(std::log10(v) - std::round(std::log10(v))) > 1e-9; }),
                   values.end());
    }
    pls_->col0(kInk);
    for (double v : values) {
      const double pos = (std::log10(v) - x0) / (x1 - x0);
      const std::string text = fmt::format("{:g}", v);
      pls_->mtex("b", 1.5, pos, 0.5, text.c_str());
    }
  }

  void xlabel(const std::string& text, double disp = 2.9) {
    pls_->col0(kInk);
    pls_->mtex("b", disp, 0.5, 0.5, esc(text).c_str());
  }
  void ylabel(const std::string& text, double disp) {
    pls_->col0(kInk);
    pls_->mtex("l", disp, 0.5, 0.5, esc(text).c_str());
  }
  // A small caption in the top-left corner inside the panel.
  void caption(const std::string& text, double rel = 0.9) {
    if (text.empty()) return;
    set_text(rel);
    pls_->col0(kInk);
    pls_->mtex("t", -1.4, 0.012, 0.0, esc(text).c_str());
    set_text(1.0);
  }

  void polyline(const std::vector<double>& x, const std::vector<double>& y, int colour, double width,
                int style = 1) {
    if (x.size() < 2) return;
    std::vector<double> dx, dy;
    decimate(x, y, static_cast<std::size_t>(options_.width_px), dx, dy);
    pls_->col0(colour);
    pls_->lsty(style);
    pls_->width(lw(width));
    pls_->line(static_cast<PLINT>(dx.size()), dx.data(), dy.data());
    pls_->lsty(1);
  }

  void markers(const std::vector<double>& x, const std::vector<double>& y, int colour, const char* glyph,
               double rel_size = 0.75) {
    if (x.empty()) return;
    set_text(rel_size);
    pls_->col0(colour);
    pls_->string(static_cast<PLINT>(x.size()), x.data(), y.data(), glyph);
    set_text(1.0);
  }

  void error_bars(const std::vector<double>& x, const std::vector<double>& y, const std::vector<double>& e,
                  int colour) {
    if (e.empty() || x.empty()) return;
    std::vector<double> lo(x.size()), hi(x.size());
    for (std::size_t i = 0; i < x.size(); ++i) {
      lo[i] = y[i] - e[i];
      hi[i] = y[i] + e[i];
    }
    pls_->col0(colour);
    pls_->width(lw(1.0));
    pls_->smin(0, 0.0);  // no caps: cleaner with many points
    pls_->erry(static_cast<PLINT>(x.size()), x.data(), lo.data(), hi.data());
    pls_->smin(0, 0.9);
  }

  void hline(double y, double x0, double x1, int colour, int style, double width) {
    PLFLT lx[2] = {x0, x1}, ly[2] = {y, y};
    pls_->col0(colour);
    pls_->lsty(style);
    pls_->width(lw(width));
    pls_->line(2, lx, ly);
    pls_->lsty(1);
  }
  void vline(double x, double y0, double y1, int colour, int style, double width) {
    PLFLT lx[2] = {x, x}, ly[2] = {y0, y1};
    pls_->col0(colour);
    pls_->lsty(style);
    pls_->width(lw(width));
    pls_->line(2, lx, ly);
    pls_->lsty(1);
  }

  FigureFile finish() {
    pls_->eop();
    pls_.reset();  // plend1: the cairo device writes and closes the file
    std::error_code ec;
    const auto size = fs::file_size(tmp_, ec);
    if (ec || size == 0) {
      fs::remove(tmp_, ec);
      throw InputError(fmt::format("{}: {} was not written (the figure device produced no output)", path_, figure_));
    }
    fs::rename(tmp_, path_, ec);
    if (ec) {
      fs::remove(tmp_, ec);
      throw InputError(fmt::format("{}: cannot be written ({})", path_, ec.message()));
    }
    finished_ = true;
    return FigureFile{path_, options_.format, options_.width_px, options_.height_px};
  }

 private:
  std::string path_;
  FigureOptions options_;
  std::string figure_;
  std::string tmp_;
  std::unique_ptr<plstream> pls_;
  double page_w_mm_ = 1, page_h_mm_ = 1;
  double text_scale_ = 1;
  double char_h_mm_ = 1;
  double current_rel_ = 1;
  bool finished_ = false;
};

// Instrument styles by name, in order of first appearance, shared across panels.
class InstrumentStyles {
 public:
  void add(const std::string& name) {
    if (index_.count(name)) return;
    index_[name] = static_cast<int>(order_.size());
    order_.push_back(name);
  }
  int colour(const std::string& name) const { return kSeriesColour[index_.at(name) % kSeriesColour.size()]; }
  const char* marker(const std::string& name) const { return kSeriesMarker[index_.at(name) % kSeriesMarker.size()]; }
  const std::vector<std::string>& names() const { return order_; }
  std::vector<Canvas::LegendEntry> legend() const {
    std::vector<Canvas::LegendEntry> out;
    for (const auto& n : order_) out.push_back({n.empty() ? "data" : n, colour(n), marker(n)});
    return out;
  }

 private:
  std::map<std::string, int> index_;
  std::vector<std::string> order_;
};

// Draws one instrument series (error bars, then markers) with x given separately.
void draw_series(Canvas& c, const InstrumentStyles& styles, const InstrumentSeries& s, const std::vector<double>& x) {
  c.error_bars(x, s.value, s.error, styles.colour(s.name));
  c.markers(x, s.value, styles.colour(s.name), styles.marker(s.name));
}

// Vertical layout: splits [y0, y1] into panels with relative heights and a gap.
std::vector<Viewport> stack(double x0, double x1, double y0, double y1, const std::vector<double>& weights, double gap) {
  const double total = std::accumulate(weights.begin(), weights.end(), 0.0);
  const double usable = (y1 - y0) - gap * static_cast<double>(weights.size() - 1);
  std::vector<Viewport> out;
  double top = y1;
  for (double w : weights) {
    const double h = usable * w / total;
    out.push_back({x0, x1, top - h, top});
    top -= h + gap;
  }
  return out;
}

// ---------------------------------------------------------------------------------------
// Periodograms.

void check_periodogram_panel(const std::string& fig, const std::string& field, const PeriodogramPanel& p) {
  require(!p.period_days.empty(), fig, field + ".period_days is empty; a periodogram needs at least 2 periods");
  require(p.period_days.size() >= 2, fig, field + ".period_days has 1 value; a periodogram needs at least 2 periods");
  check_same_size(fig, field + ".power", p.power, field + ".period_days", p.period_days.size());
  check_finite(fig, field + ".period_days", p.period_days);
  check_positive(fig, field + ".period_days", p.period_days);
  check_finite(fig, field + ".power", p.power);
  for (std::size_t i = 0; i < p.fap_levels.size(); ++i) {
    if (!std::isfinite(p.fap_levels[i].value)) {
      throw InputError(fmt::format("{}: {}.fap_levels[{}].value is {}; it must be finite", fig, field, i, p.fap_levels[i].value));
    }
  }
  for (std::size_t i = 0; i < p.peaks.size(); ++i) {
    if (!(p.peaks[i].x > 0) || !std::isfinite(p.peaks[i].x) || !std::isfinite(p.peaks[i].y)) {
      throw InputError(fmt::format("{}: {}.peaks[{}] is ({}, {}); the period must be finite and > 0 and the power finite",
                                   fig, field, i, p.peaks[i].x, p.peaks[i].y));
    }
  }
}

std::vector<double> log10_of(const std::vector<double>& v) {
  std::vector<double> out(v.size());
  std::transform(v.begin(), v.end(), out.begin(), [](double x) { return std::log10(x); });
  return out;
}

// Sorted by x (periodograms come on frequency grids, i.e. decreasing period).
void sort_by_x(std::vector<double>& x, std::vector<double>& y) {
  if (std::is_sorted(x.begin(), x.end())) return;
  std::vector<std::size_t> idx(x.size());
  std::iota(idx.begin(), idx.end(), 0);
  std::sort(idx.begin(), idx.end(), [&](std::size_t a, std::size_t b) { return x[a] < x[b]; });
  std::vector<double> sx(x.size()), sy(x.size());
  for (std::size_t i = 0; i < idx.size(); ++i) {
    sx[i] = x[idx[i]];
    sy[i] = y[idx[i]];
  }
  x.swap(sx);
  y.swap(sy);
}

constexpr std::array<int, 4> kLevelColour{kVermillion, kOrange, kPurple, kGreen};
constexpr std::array<int, 4> kLevelStyle{2, 3, 4, 5};

void draw_periodogram_panel(Canvas& c, const Viewport& v, const PeriodogramPanel& p, double lx0, double lx1,
                            bool x_numbers, int line_colour) {
  std::vector<double> x = log10_of(p.period_days), y = p.power;
  sort_by_x(x, y);
  Range yr;
  yr.add(y);
  yr.add(0.0);
  for (const auto& l : p.fap_levels) yr.add(l.value);
  for (const auto& pk : p.peaks) yr.add(pk.y);
  double ylo = yr.lo, yhi = yr.hi;
  if (!(yhi > ylo)) yhi = ylo + 1.0;
  yhi += 0.16 * (yhi - ylo);  // room for peak labels
  c.panel(v, lx0, lx1, ylo, yhi);
  c.axes(x_numbers, true, true);
  c.polyline(x, y, line_colour, 1.3);
  for (std::size_t i = 0; i < p.fap_levels.size(); ++i) {
    const auto& l = p.fap_levels[i];
    const int col = kLevelColour[i % kLevelColour.size()];
    c.hline(l.value, lx0, lx1, col, kLevelStyle[i % kLevelStyle.size()], 1.5);
    if (!l.label.empty()) {
      c.set_text(0.8);
      c.p().col0(col);
      c.p().ptex(lx1 - 0.01 * (lx1 - lx0), l.value + 0.035 * (yhi - ylo), 1, 0, 1.0, esc(l.label).c_str());
      c.set_text(1.0);
    }
  }
  for (const auto& pk : p.peaks) {
    const double px = std::log10(pk.x);
    if (px < lx0 || px > lx1) continue;
    const double py = pk.y + 0.035 * (yhi - ylo);
    c.markers({px}, {py}, kInk, "▼", 0.55);
    if (!pk.label.empty()) {
      c.set_text(0.8);
      c.p().col0(kInk);
      c.p().ptex(px, py + 0.03 * (yhi - ylo), 1, 0, 0.5, esc(pk.label).c_str());
      c.set_text(1.0);
    }
  }
  c.caption(p.title);
}

}  // namespace

FigureFile write_periodogram_figure(const PeriodogramFigureData& data, const std::string& path,
                                    const FigureOptions& options) {
  const std::string fig = "periodogram figure";
  check_periodogram_panel(fig, "periodogram", data.periodogram);
  const bool window = !data.window_period_days.empty() || !data.window_power.empty();
  if (window) {
    require(data.window_period_days.size() >= 2, fig, "window_period_days needs at least 2 periods (or leave both window arrays empty)");
    check_same_size(fig, "window_power", data.window_power, "window_period_days", data.window_period_days.size());
    check_finite(fig, "window_period_days", data.window_period_days);
    check_positive(fig, "window_period_days", data.window_period_days);
    check_finite(fig, "window_power", data.window_power);
  }
  for (std::size_t i = 0; i < data.window_peaks.size(); ++i) {
    const auto& pk = data.window_peaks[i];
    if (!(pk.x > 0) || !std::isfinite(pk.x) || !std::isfinite(pk.y)) {
      throw InputError(fmt::format("{}: window_peaks[{}] is ({}, {}); the period must be finite and > 0 and the power finite",
                                   fig, i, pk.x, pk.y));
    }
  }

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  Range xr;
  xr.add(log10_of(data.periodogram.period_days));
  if (window) xr.add(log10_of(data.window_period_days));
  xr = xr.padded(0.01);
  const double top = c.title(options.title);
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.5 * c.cw();
  const double bottom = 4.2 * c.ch();
  std::vector<Viewport> vp = window ? stack(left, right, bottom, top - 1.0 * c.ch(), {0.7, 0.3}, 1.2 * c.ch())
                                    : stack(left, right, bottom, top - 1.0 * c.ch(), {1.0}, 0);
  draw_periodogram_panel(c, vp[0], data.periodogram, xr.lo, xr.hi, !window, kBlue);
  c.ylabel(data.periodogram.power_label, 5.2);
  if (window) {
    PeriodogramPanel w;
    w.period_days = data.window_period_days;
    w.power = data.window_power;
    w.peaks = data.window_peaks;
    w.title = "Window function (sampling)";
    draw_periodogram_panel(c, vp[1], w, xr.lo, xr.hi, true, kMuted);
    c.ylabel("Window power", 5.2);
  }
  c.xlabel("Period [d]");
  return c.finish();
}

FigureFile write_periodogram_steps_figure(const std::vector<PeriodogramPanel>& panels, const std::string& path,
                                          const FigureOptions& options) {
  const std::string fig = "periodogram steps figure";
  require(!panels.empty(), fig, "no panels; it needs at least 1");
  require(panels.size() <= 8, fig, fmt::format("{} panels; it takes at most 8", panels.size()));
  for (std::size_t i = 0; i < panels.size(); ++i) check_periodogram_panel(fig, fmt::format("panels[{}]", i), panels[i]);

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  Range xr;
  for (const auto& p : panels) xr.add(log10_of(p.period_days));
  xr = xr.padded(0.01);
  const double top = c.title(options.title);
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.5 * c.cw();
  const double bottom = 4.2 * c.ch();
  const auto vp = stack(left, right, bottom, top - 1.0 * c.ch(), std::vector<double>(panels.size(), 1.0), 0.8 * c.ch());
  for (std::size_t i = 0; i < panels.size(); ++i) {
    draw_periodogram_panel(c, vp[i], panels[i], xr.lo, xr.hi, i + 1 == panels.size(), kBlue);
    if (panels.size() <= 3 || i == panels.size() / 2) c.ylabel(panels[i].power_label, 5.2);
  }
  c.xlabel("Period [d]");
  return c.finish();
}

// ---------------------------------------------------------------------------------------
// Velocities against time.

namespace {

double choose_time_zero(double requested, const Range& t) {
  if (std::isfinite(requested)) return requested;
  if (t.empty() || t.lo <= 1e5) return 0.0;
  return std::floor(t.lo / 1000.0) * 1000.0;
}

std::string time_label(double zero, const Range& t) {
  if (zero == 0.0) return t.lo > 1e5 ? "Time [BJD_TDB]" : "Time [d]";
  const std::string z = zero == std::floor(zero) ? fmt::format("{:.0f}", zero) : fmt::format("{}", zero);
  return "Time [BJD_TDB − " + z + "]";
}

std::vector<double> shifted(const std::vector<double>& t, double zero) {
  std::vector<double> out(t.size());
  std::transform(t.begin(), t.end(), out.begin(), [zero](double x) { return x - zero; });
  return out;
}

}  // namespace

FigureFile write_time_series_figure(const TimeSeriesFigureData& data, const std::string& path,
                                    const FigureOptions& options) {
  const std::string fig = "velocity figure";
  std::size_t n = 0;
  for (const auto& s : data.instruments) {
    check_series(fig, "instruments", s);
    n += s.time_bjd.size();
  }
  require(n > 0, fig, "no data points; it needs at least 1");
  check_curve(fig, "model_time_bjd", data.model_time_bjd, "model_value", data.model_value);
  for (const auto& s : data.residuals) check_series(fig, "residuals", s);
  require(std::isnan(data.time_zero_bjd) || std::isfinite(data.time_zero_bjd), fig, "time_zero_bjd must be finite or NaN");

  InstrumentStyles styles;
  for (const auto& s : data.instruments) styles.add(s.name);
  for (const auto& s : data.residuals) styles.add(s.name);

  Range tr;
  for (const auto& s : data.instruments) tr.add(s.time_bjd);
  for (const auto& s : data.residuals) tr.add(s.time_bjd);
  const double zero = choose_time_zero(data.time_zero_bjd, tr);
  Range xr;
  xr.add(tr.lo - zero);
  xr.add(tr.hi - zero);
  xr = xr.padded(0.025);

  Range yr;
  for (const auto& s : data.instruments) {
    for (std::size_t i = 0; i < s.value.size(); ++i) {
      const double e = s.error.empty() ? 0.0 : s.error[i];
      yr.add(s.value[i] - e);
      yr.add(s.value[i] + e);
    }
  }
  for (std::size_t i = 0; i < data.model_time_bjd.size(); ++i) {
    const double t = data.model_time_bjd[i] - zero;
    if (t >= xr.lo && t <= xr.hi) yr.add(data.model_value[i]);
  }
  yr = yr.padded(0.06);

  const bool with_res = !data.residuals.empty();
  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const double top = c.title(options.title);
  auto legend = styles.legend();
  if (!data.model_value.empty()) legend.push_back({data.model_label, kInk, nullptr, 1, 2.0});
  c.legend_row(legend, top - 0.9 * c.ch());
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.5 * c.cw();
  const double bottom = 4.2 * c.ch();
  const double plot_top = top - 2.3 * c.ch();
  const auto vp = with_res ? stack(left, right, bottom, plot_top, {0.72, 0.28}, 0.6 * c.ch())
                           : stack(left, right, bottom, plot_top, {1.0}, 0);

  c.panel(vp[0], xr.lo, xr.hi, yr.lo, yr.hi);
  c.axes(!with_res, true);
  if (!data.model_time_bjd.empty()) {
    std::vector<double> mx = shifted(data.model_time_bjd, zero), my = data.model_value;
    sort_by_x(mx, my);
    c.polyline(mx, my, kInk, 1.6);
  }
  for (const auto& s : data.instruments) draw_series(c, styles, s, shifted(s.time_bjd, zero));
  c.ylabel(data.value_label, 5.2);

  if (with_res) {
    Range rr;
    for (const auto& s : data.residuals) {
      for (std::size_t i = 0; i < s.value.size(); ++i) {
        const double e = s.error.empty() ? 0.0 : s.error[i];
        rr.add(s.value[i] - e);
        rr.add(s.value[i] + e);
      }
    }
    rr.add(0.0);
    const double m = std::max(std::abs(rr.lo), std::abs(rr.hi));
    rr = Range{-m, m}.padded(0.08);
    c.panel(vp[1], xr.lo, xr.hi, rr.lo, rr.hi);
    c.axes(true, true);
    c.hline(0.0, xr.lo, xr.hi, kInk, 2, 1.2);
    for (const auto& s : data.residuals) draw_series(c, styles, s, shifted(s.time_bjd, zero));
    c.ylabel(data.residual_label, 5.2);
  }
  c.xlabel(time_label(zero, tr));
  return c.finish();
}

// ---------------------------------------------------------------------------------------
// Phase-folded orbits.

namespace {

std::vector<double> fold(const std::vector<double>& t, double t_ref, double period) {
  std::vector<double> out(t.size());
  for (std::size_t i = 0; i < t.size(); ++i) {
    double ph = std::fmod((t[i] - t_ref) / period, 1.0);
    if (ph < -0.5) ph += 1.0;
    if (ph >= 0.5) ph -= 1.0;
    out[i] = ph;
  }
  return out;
}

}  // namespace

FigureFile write_phase_fold_figure(const PhaseFoldFigureData& data, const std::string& path,
                                   const FigureOptions& options) {
  const std::string fig = "phase-folded figure";
  require(!data.planets.empty(), fig, "no planets; it needs at least 1");
  require(data.planets.size() <= 6, fig, fmt::format("{} planets; it takes at most 6", data.planets.size()));
  InstrumentStyles styles;
  for (std::size_t k = 0; k < data.planets.size(); ++k) {
    const auto& p = data.planets[k];
    const std::string f = fmt::format("planets[{}]", k);
    if (!(p.period_days > 0) || !std::isfinite(p.period_days)) {
      throw InputError(fmt::format("{}: {}.period_days is {}; it must be finite and > 0", fig, f, p.period_days));
    }
    require(std::isfinite(p.t_ref_bjd), fig, f + ".t_ref_bjd must be finite");
    std::size_t n = 0;
    for (const auto& s : p.data) {
      check_series(fig, f + ".data", s);
      n += s.time_bjd.size();
      styles.add(s.name);
    }
    require(n > 0, fig, f + ".data has no points; it needs at least 1");
    for (const auto& s : p.residuals) {
      check_series(fig, f + ".residuals", s);
      styles.add(s.name);
    }
    check_curve(fig, f + ".model_phase", p.model_phase, f + ".model_value", p.model_value);
  }

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const double top = c.title(options.title);
  auto legend = styles.legend();
  legend.push_back({"Model", kInk, nullptr, 1, 2.0});
  c.legend_row(legend, top - 0.9 * c.ch());
  const std::size_t np = data.planets.size();
  const std::size_t cols = std::min<std::size_t>(np, 3), rows = (np + cols - 1) / cols;
  const double left = 0.02 + 7.5 * c.cw(), right = 1.0 - 1.5 * c.cw();
  const double bottom = 4.2 * c.ch(), plot_top = top - 2.3 * c.ch();
  const double hgap = 8.0 * c.cw(), vgap = 5.5 * c.ch();
  const double cell_w = (right - left - hgap * static_cast<double>(cols - 1)) / static_cast<double>(cols);
  const double cell_h = (plot_top - bottom - vgap * static_cast<double>(rows - 1)) / static_cast<double>(rows);

  for (std::size_t k = 0; k < np; ++k) {
    const auto& p = data.planets[k];
    const std::size_t col = k % cols, row = k / cols;
    const double x0 = left + static_cast<double>(col) * (cell_w + hgap);
    const double y1 = plot_top - static_cast<double>(row) * (cell_h + vgap);
    const bool with_res = !p.residuals.empty();
    const auto vp = with_res ? stack(x0, x0 + cell_w, y1 - cell_h, y1 - 1.6 * c.ch(), {0.7, 0.3}, 0.5 * c.ch())
                             : stack(x0, x0 + cell_w, y1 - cell_h, y1 - 1.6 * c.ch(), {1.0}, 0);
    Range yr;
    for (const auto& s : p.data) {
      for (std::size_t i = 0; i < s.value.size(); ++i) {
        const double e = s.error.empty() ? 0.0 : s.error[i];
        yr.add(s.value[i] - e);
        yr.add(s.value[i] + e);
      }
    }
    yr.add(p.model_value);
    yr = yr.padded(0.06);
    // Phase ticks every 0.25 where there is room, else every 0.5.
    const double phase_tick = cell_w * c.width_px() > 250 ? 0.25 : 0.5;
    c.panel(vp[0], -0.5, 0.5, yr.lo, yr.hi);
    c.axes(!with_res, true, false, true, phase_tick);
    c.hline(0.0, -0.5, 0.5, kMuted, 3, 1.0);
    for (const auto& s : p.data) draw_series(c, styles, s, fold(s.time_bjd, p.t_ref_bjd, p.period_days));
    if (!p.model_phase.empty()) {
      std::vector<double> mx = p.model_phase, my = p.model_value;
      sort_by_x(mx, my);
      c.polyline(mx, my, kInk, 2.0);
    }
    // Heading above the panel: planet and its numbers.
    const std::string head = p.planet_label.empty() ? p.subtitle
                             : p.subtitle.empty()   ? "Planet " + p.planet_label
                                                    : "Planet " + p.planet_label + ":  " + p.subtitle;
    c.set_text(1.0);
    c.set_text(c.fit_rel(head, cell_w, false, 1.0));
    c.p().col0(kInk);
    c.p().mtex("t", 0.6, 0.0, 0.0, esc(head).c_str());
    c.set_text(1.0);
    if (col == 0) c.ylabel(data.value_label, 5.2);
    if (with_res) {
      Range rr;
      for (const auto& s : p.residuals) {
        for (std::size_t i = 0; i < s.value.size(); ++i) {
          const double e = s.error.empty() ? 0.0 : s.error[i];
          rr.add(s.value[i] - e);
          rr.add(s.value[i] + e);
        }
      }
      rr.add(0.0);
      const double m = std::max(std::abs(rr.lo), std::abs(rr.hi));
      rr = Range{-m, m}.padded(0.08);
      c.panel(vp[1], -0.5, 0.5, rr.lo, rr.hi);
      c.axes(true, true, false, true, phase_tick);
      c.hline(0.0, -0.5, 0.5, kInk, 2, 1.2);
      for (const auto& s : p.residuals) draw_series(c, styles, s, fold(s.time_bjd, p.t_ref_bjd, p.period_days));
      if (col == 0) c.ylabel(data.residual_label, 5.2);
    }
    std::string phase_label = "Orbital phase (0 = reference time)";
    if (c.fit_rel(phase_label, cell_w, false, 1.0) < 0.8) phase_label = "Orbital phase";
    const double rel = c.fit_rel(phase_label, cell_w, false, 1.0);
    c.set_text(rel);
    c.xlabel(phase_label, 2.9 / rel);
    c.set_text(1.0);
  }
  return c.finish();
}

// ---------------------------------------------------------------------------------------
// O−C of transit times.

FigureFile write_oc_figure(const OcFigureData& data, const std::string& path, const FigureOptions& options) {
  const std::string fig = "O−C figure";
  require(!data.epoch.empty(), fig, "no transits; it needs at least 1");
  check_finite(fig, "epoch", data.epoch);
  check_same_size(fig, "o_minus_c_days", data.o_minus_c_days, "epoch", data.epoch.size());
  check_same_size(fig, "error_days", data.error_days, "epoch", data.epoch.size());
  check_finite(fig, "o_minus_c_days", data.o_minus_c_days);
  check_finite(fig, "error_days", data.error_days);
  check_positive(fig, "error_days", data.error_days);
  check_curve(fig, "curve_epoch", data.curve_epoch, "curve_o_minus_c_days", data.curve_o_minus_c_days);

  constexpr double kMin = 1440.0;
  std::vector<double> oc(data.epoch.size()), err(data.epoch.size());
  for (std::size_t i = 0; i < oc.size(); ++i) {
    oc[i] = data.o_minus_c_days[i] * kMin;
    err[i] = data.error_days[i] * kMin;
  }
  std::vector<double> cx = data.curve_epoch, cy(data.curve_o_minus_c_days.size());
  for (std::size_t i = 0; i < cy.size(); ++i) cy[i] = data.curve_o_minus_c_days[i] * kMin;
  sort_by_x(cx, cy);

  Range xr;
  xr.add(data.epoch);
  xr = xr.padded(0.04);
  Range yr;
  for (std::size_t i = 0; i < oc.size(); ++i) {
    yr.add(oc[i] - err[i]);
    yr.add(oc[i] + err[i]);
  }
  for (std::size_t i = 0; i < cx.size(); ++i) {
    if (cx[i] >= xr.lo && cx[i] <= xr.hi) yr.add(cy[i]);
  }
  yr.add(0.0);
  yr = yr.padded(0.08);

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const std::string title = !options.title.empty() ? options.title
                            : data.planet_label.empty() ? "Transit timing residuals"
                                                        : "Transit timing residuals, planet " + data.planet_label;
  const double top = c.title(title);
  std::vector<Canvas::LegendEntry> legend{{"Observed − linear ephemeris", kBlue, "●"}};
  if (!cx.empty()) legend.push_back({data.curve_label, kVermillion, nullptr, 2, 2.0});
  c.legend_row(legend, top - 0.9 * c.ch());
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.5 * c.cw();
  const Viewport v{left, right, 4.2 * c.ch(), top - 2.3 * c.ch()};
  c.panel(v, xr.lo, xr.hi, yr.lo, yr.hi);
  c.axes(true, true);
  c.hline(0.0, xr.lo, xr.hi, kMuted, 3, 1.2);
  if (!cx.empty()) c.polyline(cx, cy, kVermillion, 2.0, 2);
  c.error_bars(data.epoch, oc, err, kBlue);
  c.markers(data.epoch, oc, kBlue, "●");
  c.ylabel("O − C [min]", 5.2);
  c.xlabel("Transit number (epoch)");
  return c.finish();
}

// ---------------------------------------------------------------------------------------
// Corner plot.

namespace {

// Density-level thresholds enclosing the given fractions of the total (sorted cells).
std::vector<double> mass_levels(const std::vector<double>& cells, const std::vector<double>& fractions) {
  std::vector<double> s = cells;
  std::sort(s.begin(), s.end(), std::greater<>());
  const double total = std::accumulate(s.begin(), s.end(), 0.0);
  std::vector<double> out;
  for (double f : fractions) {
    double acc = 0;
    double level = s.empty() ? 0 : s.front();
    for (double v : s) {
      acc += v;
      level = v;
      if (acc >= f * total) break;
    }
    out.push_back(level);
  }
  return out;
}

}  // namespace

FigureFile write_corner_figure(const CornerFigureData& data, const std::string& path, const FigureOptions& options) {
  const std::string fig = "corner figure";
  const std::size_t np = data.parameters.size();
  require(np >= 1, fig, "no parameters; it needs at least 1");
  require(np <= 12, fig, fmt::format("{} parameters; it takes at most 12", np));
  require(data.bins >= 5 && data.bins <= 200, fig, fmt::format("bins = {}: must be in [5, 200]", data.bins));
  const std::size_t ns = data.parameters[0].samples.size();
  require(ns >= 10, fig, fmt::format("parameters[0] '{}' has {} samples; it needs at least 10", data.parameters[0].label, ns));
  for (std::size_t k = 0; k < np; ++k) {
    const auto& p = data.parameters[k];
    const std::string f = fmt::format("parameters[{}] '{}'.samples", k, p.label);
    check_same_size(fig, f, p.samples, "parameters[0].samples", ns);
    check_finite(fig, f, p.samples);
    require(std::isnan(p.truth) || std::isfinite(p.truth), fig, fmt::format("parameters[{}].truth must be finite or NaN", k));
  }

  // Per parameter: plotting range from the 0.5-99.5 % quantiles (so stray walkers do not
  // squash the picture) and the 16/50/84 % quantiles.
  struct Stat {
    double lo, hi, q16, q50, q84;
  };
  std::vector<Stat> st(np);
  for (std::size_t k = 0; k < np; ++k) {
    std::vector<double> s = data.parameters[k].samples;
    std::sort(s.begin(), s.end());
    Range r;
    r.add(quantile_sorted(s, 0.005));
    r.add(quantile_sorted(s, 0.995));
    r.add(data.parameters[k].truth);
    r = r.padded(0.08);
    st[k] = {r.lo, r.hi, quantile_sorted(s, 0.16), quantile_sorted(s, 0.5), quantile_sorted(s, 0.84)};
  }
  const int nb = data.bins;
  auto bin_of = [nb](double v, double lo, double hi) -> int {
    if (v < lo || v > hi) return -1;
    return std::min(nb - 1, static_cast<int>((v - lo) / (hi - lo) * nb));
  };

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const double top = c.title(options.title);
  const double text_rel = std::clamp(std::sqrt(4.0 / static_cast<double>(np)), 0.75, 1.0);
  // Square cells when the page allows.
  const double left = 0.02 + 8.0 * c.cw() * text_rel, bottom = 6.0 * c.ch() * text_rel;
  const double avail_w = 1.0 - 1.5 * c.cw() - left, avail_h = top - 2.6 * c.ch() * text_rel - bottom;
  const double gap_w = 0.6 * c.cw(), gap_h = 0.6 * c.ch();
  double cell_h = (avail_h - gap_h * static_cast<double>(np - 1)) / static_cast<double>(np);
  double cell_w = std::min((avail_w - gap_w * static_cast<double>(np - 1)) / static_cast<double>(np), cell_h / c.page_aspect());
  cell_h = cell_w * c.page_aspect();
  const double grid_w = cell_w * static_cast<double>(np) + gap_w * static_cast<double>(np - 1);
  const double x_origin = left + std::max(0.0, (avail_w - grid_w) / 2);

  // cmap1: white to Okabe-Ito blue to a dark navy, for densities.
  {
    constexpr int n1 = 64;
    std::array<PLINT, n1> r{}, g{}, b{};
    for (int i = 0; i < n1; ++i) {
      const double t = static_cast<double>(i) / (n1 - 1);
      const double u = std::min(1.0, t * 1.4), w = std::max(0.0, (t - 0.714) / 0.286);
      r[i] = static_cast<PLINT>(std::lround((255 + (0 - 255) * u) * (1 - w) + 10 * w));
      g[i] = static_cast<PLINT>(std::lround((255 + (114 - 255) * u) * (1 - w) + 50 * w));
      b[i] = static_cast<PLINT>(std::lround((255 + (178 - 255) * u) * (1 - w) + 100 * w));
    }
    c.p().scmap1(r.data(), g.data(), b.data(), n1);
  }

  for (std::size_t row = 0; row < np; ++row) {
    for (std::size_t col = 0; col <= row; ++col) {
      const double x0 = x_origin + static_cast<double>(col) * (cell_w + gap_w);
      const double y1 = top - 2.6 * c.ch() * text_rel - static_cast<double>(row) * (cell_h + gap_h);
      const Viewport v{x0, x0 + cell_w, y1 - cell_h, y1};
      const auto& px = data.parameters[col];
      const Stat& sx = st[col];
      const bool x_numbers = row + 1 == np;
      if (row == col) {
        // 1-D histogram as a filled step outline.
        std::vector<double> h(nb, 0.0);
        for (double s : px.samples) {
          const int b = bin_of(s, sx.lo, sx.hi);
          if (b >= 0) h[b] += 1;
        }
        const double hmax = *std::max_element(h.begin(), h.end());
        c.panel(v, sx.lo, sx.hi, 0.0, (hmax > 0 ? hmax : 1.0) * 1.1);
        std::vector<double> ox{sx.lo}, oy{0.0};
        const double bw = (sx.hi - sx.lo) / nb;
        for (int b = 0; b < nb; ++b) {
          ox.push_back(sx.lo + b * bw);
          oy.push_back(h[b]);
          ox.push_back(sx.lo + (b + 1) * bw);
          oy.push_back(h[b]);
        }
        ox.push_back(sx.hi);
        oy.push_back(0.0);
        c.p().col0(kBlueFaint);
        c.p().fill(static_cast<PLINT>(ox.size()), ox.data(), oy.data());
        c.polyline(ox, oy, kBlue, 1.4);
        const double yt = (hmax > 0 ? hmax : 1.0) * 1.1;
        c.vline(sx.q50, 0, yt, kInk, 1, 1.4);
        c.vline(sx.q16, 0, yt, kInk, 2, 1.1);
        c.vline(sx.q84, 0, yt, kInk, 2, 1.1);
        if (std::isfinite(px.truth)) c.vline(px.truth, 0, yt, kVermillion, 1, 2.0);
        c.axes(x_numbers, false, false, false, nice_step(sx.hi - sx.lo, 3.0), 0, 0.85 * text_rel);
        const std::string q = format_with_errors(sx.q50, sx.q50 - sx.q16, sx.q84 - sx.q50);
        c.set_text(1.0);
        c.set_text(c.fit_rel(q, cell_w + gap_w, false, 0.8 * text_rel));
        c.p().col0(kInk);
        c.p().mtex("t", 0.6, 0.5, 0.5, esc(q).c_str());
      } else {
        const auto& py = data.parameters[row];
        const Stat& sy = st[row];
        std::vector<std::vector<double>> h(nb, std::vector<double>(nb, 0.0));
        for (std::size_t i = 0; i < ns; ++i) {
          const int bx = bin_of(px.samples[i], sx.lo, sx.hi), by = bin_of(py.samples[i], sy.lo, sy.hi);
          if (bx >= 0 && by >= 0) h[bx][by] += 1;
        }
        // A light [1 2 1] smoothing so contours follow the density, not the shot noise.
        std::vector<std::vector<double>> sm(nb, std::vector<double>(nb, 0.0));
        for (int i = 0; i < nb; ++i) {
          for (int j = 0; j < nb; ++j) {
            double acc = 0, wsum = 0;
            for (int di = -1; di <= 1; ++di) {
              for (int dj = -1; dj <= 1; ++dj) {
                const int a = i + di, b = j + dj;
                if (a < 0 || b < 0 || a >= nb || b >= nb) continue;
                const double w = (di == 0 ? 2.0 : 1.0) * (dj == 0 ? 2.0 : 1.0);
                acc += w * h[a][b];
                wsum += w;
              }
            }
            sm[i][j] = acc / wsum;
          }
        }
        std::vector<const PLFLT*> rows_ptr(nb);
        for (int i = 0; i < nb; ++i) rows_ptr[i] = sm[i].data();
        double zmax = 0;
        for (const auto& r : sm) zmax = std::max(zmax, *std::max_element(r.begin(), r.end()));
        c.panel(v, sx.lo, sx.hi, sy.lo, sy.hi);
        if (zmax > 0) {
          c.p().image(rows_ptr.data(), nb, nb, sx.lo, sx.hi, sy.lo, sy.hi, 0.0, zmax, sx.lo, sx.hi, sy.lo, sy.hi);
          std::vector<double> flat;
          for (const auto& r : sm) flat.insert(flat.end(), r.begin(), r.end());
          // 1 - exp(-1/2) and 1 - exp(-2): the 1 and 2 sigma regions of a 2-D Gaussian.
          std::vector<double> lv = mass_levels(flat, {0.8647, 0.3935});
          lv.erase(std::unique(lv.begin(), lv.end()), lv.end());
          lv.erase(std::remove_if(lv.begin(), lv.end(), [zmax](double l) { return !(l > 0 && l < zmax); }), lv.end());
          if (!lv.empty()) {
            std::vector<PLFLT> xg(nb), yg(nb);
            for (int i = 0; i < nb; ++i) {
              xg[i] = sx.lo + (i + 0.5) * (sx.hi - sx.lo) / nb;
              yg[i] = sy.lo + (i + 0.5) * (sy.hi - sy.lo) / nb;
            }
            PLcGrid grid{xg.data(), yg.data(), nullptr, nb, nb, 0};
            c.p().col0(kInk);
            c.p().width(c.lw(1.2));
            c.p().cont(rows_ptr.data(), nb, nb, 1, nb, 1, nb, lv.data(), static_cast<PLINT>(lv.size()),
                       plcallback::tr1, &grid);
          }
        }
        if (std::isfinite(px.truth)) c.vline(px.truth, sy.lo, sy.hi, kVermillion, 1, 1.6);
        if (std::isfinite(py.truth)) c.hline(py.truth, sx.lo, sx.hi, kVermillion, 1, 1.6);
        c.axes(x_numbers, col == 0, false, false, nice_step(sx.hi - sx.lo, 3.0), nice_step(sy.hi - sy.lo, 3.0),
               0.85 * text_rel);
        if (col == 0) {
          c.set_text(1.0);
          c.set_text(c.fit_rel(py.label, cell_h, true, 0.9 * text_rel));
          c.ylabel(py.label, 6.0 * 0.9 * text_rel / c.fit_rel(py.label, cell_h, true, 0.9 * text_rel));
        }
      }
      if (x_numbers) {
        c.set_text(1.0);
        const double rel = c.fit_rel(px.label, cell_w + gap_w, false, 0.9 * text_rel);
        c.set_text(rel);
        c.xlabel(px.label, 3.2 * 0.9 * text_rel / rel);
      }
      c.set_text(1.0);
    }
  }
  return c.finish();
}

// ---------------------------------------------------------------------------------------
// Trace plots.

FigureFile write_trace_figure(const TraceFigureData& data, const std::string& path, const FigureOptions& options) {
  const std::string fig = "trace figure";
  const std::size_t np = data.labels.size();
  require(np >= 1, fig, "no parameters (labels is empty); it needs at least 1");
  require(np <= 12, fig, fmt::format("{} parameters; it takes at most 12", np));
  require(data.n_steps >= 2, fig, fmt::format("n_steps = {}: must be >= 2", data.n_steps));
  require(data.n_walkers >= 1, fig, fmt::format("n_walkers = {}: must be >= 1", data.n_walkers));
  require(data.max_walkers_shown >= 1 && data.max_walkers_shown <= 100, fig,
          fmt::format("max_walkers_shown = {}: must be in [1, 100]", data.max_walkers_shown));
  require(std::isfinite(data.burn_in_step), fig, "burn_in_step must be finite");
  const std::size_t expected = data.n_steps * data.n_walkers * np;
  if (data.chain.size() != expected) {
    throw InputError(fmt::format("{}: chain has {} values; it must have n_steps × n_walkers × parameters = {} × {} × {} = {}",
                                 fig, data.chain.size(), data.n_steps, data.n_walkers, np, expected));
  }
  const std::size_t nw = std::min<std::size_t>(data.n_walkers, static_cast<std::size_t>(data.max_walkers_shown));
  // Only the drawn walkers must be finite (a stuck walker elsewhere is not our business),
  // but a non-finite value there cannot be drawn.
  for (std::size_t s = 0; s < data.n_steps; ++s) {
    for (std::size_t w = 0; w < nw; ++w) {
      for (std::size_t p = 0; p < np; ++p) {
        const double v = data.chain[(s * data.n_walkers + w) * np + p];
        if (!std::isfinite(v)) {
          throw InputError(fmt::format("{}: chain[step {}, walker {}, '{}'] is {}; it must be finite", fig, s, w, data.labels[p], v));
        }
      }
    }
  }

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const double top = c.title(options.title.empty() ? fmt::format("Walker traces ({} of {} walkers shown)", nw, data.n_walkers)
                                                   : options.title);
  const double text_rel = std::clamp(std::sqrt(5.0 / static_cast<double>(np)), 0.65, 1.0);
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.0 * c.cw();
  const auto vp = stack(left, right, 4.2 * c.ch(), top - 0.8 * c.ch(), std::vector<double>(np, 1.0), 0.5 * c.ch());
  const double x_hi = static_cast<double>(data.n_steps - 1);
  // At most ~width px points per walker line (stride); decimate() keeps the extremes.
  std::vector<double> steps(data.n_steps);
  std::iota(steps.begin(), steps.end(), 0.0);
  for (std::size_t p = 0; p < np; ++p) {
    Range yr;
    std::vector<std::vector<double>> lines(nw, std::vector<double>(data.n_steps));
    for (std::size_t w = 0; w < nw; ++w) {
      for (std::size_t s = 0; s < data.n_steps; ++s) {
        lines[w][s] = data.chain[(s * data.n_walkers + w) * np + p];
        yr.add(lines[w][s]);
      }
    }
    yr = yr.padded(0.06);
    c.panel(vp[p], 0.0, x_hi, yr.lo, yr.hi);
    if (data.burn_in_step > 0) {
      const double b = std::min(data.burn_in_step, x_hi);
      PLFLT fx[4] = {0, b, b, 0}, fy[4] = {yr.lo, yr.lo, yr.hi, yr.hi};
      c.p().col0(kPale);
      c.p().fill(4, fx, fy);
    }
    c.axes(p + 1 == np, true, false, true, 0, 0, 0.85 * text_rel);
    for (std::size_t w = 0; w < nw; ++w) c.polyline(steps, lines[w], kWalkerColour[w % kWalkerColour.size()], 0.8);
    if (data.burn_in_step >= 0) {
      c.vline(std::min(data.burn_in_step, x_hi), yr.lo, yr.hi, kInk, 2, 1.4);
      if (p == 0) {
        c.set_text(0.8 * text_rel);
        c.p().col0(kInk);
        c.p().ptex(std::min(data.burn_in_step, x_hi), yr.hi - 0.12 * (yr.hi - yr.lo), 1, 0, -0.1, " burn-in ends");
      }
    }
    c.caption(data.labels[p], 0.85 * text_rel);
    c.set_text(1.0);
  }
  c.xlabel("Step");
  return c.finish();
}

// ---------------------------------------------------------------------------------------
// Stability of posterior draws (declared in stability_analysis.h).

std::string write_stability_figure(const StabilityRunResult& r, const std::string& path) {
  const std::string fig = "stability figure";
  std::vector<double> xs, ys, xu, yu;
  for (const DrawStability& d : r.summary.per_draw) {
    if (!d.valid || !std::isfinite(d.min_separation_hill)) continue;
    const double y = std::log10(std::max(d.max_amd_beta, 1e-6));
    const bool good = std::isfinite(d.mean_megno) ? (d.survived && d.megno_regular) : d.amd;
    (good ? xs : xu).push_back(d.min_separation_hill);
    (good ? ys : yu).push_back(y);
  }
  require(!xs.empty() || !xu.empty(), fig, "no valid draw to show");
  Range xr, yr;
  xr.add(xs), xr.add(xu), xr.add(2.0 * std::sqrt(3.0));
  yr.add(ys), yr.add(yu), yr.add(0.0);
  xr = xr.padded(0.06);
  yr = yr.padded(0.08);
  std::lock_guard<std::mutex> lock(plplot_mutex());
  FigureOptions options;
  Canvas c(path, options, fig);
  const double top = c.title(fmt::format("Stability of {} draws: Hill > 2√3 {:.0f} %, AMD {:.0f} %, regular MEGNO {}",
                                         r.summary.draws, 100.0 * r.summary.fraction_hill_two_sqrt3,
                                         100.0 * r.summary.fraction_amd,
                                         std::isfinite(r.summary.fraction_megno_regular)
                                             ? fmt::format("{:.0f} %", 100.0 * r.summary.fraction_megno_regular)
                                             : std::string("not run")));
  c.legend_row({{"survived, regular MEGNO", kBlue, "●"}, {"unstable or chaotic", kVermillion, "●"}},
               top - 0.9 * c.ch());
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.5 * c.cw();
  const Viewport v{left, right, 4.2 * c.ch(), top - 2.3 * c.ch()};
  c.panel(v, xr.lo, xr.hi, yr.lo, yr.hi);
  c.axes(true, true);
  c.hline(0.0, xr.lo, xr.hi, kMuted, 3, 1.2);
  const double x0 = 2.0 * std::sqrt(3.0);
  c.polyline({x0, x0}, {yr.lo, yr.hi}, kMuted, 1.2, 3);
  if (!xs.empty()) c.markers(xs, ys, kBlue, "●");
  if (!xu.empty()) c.markers(xu, yu, kVermillion, "●");
  c.ylabel("log10 AMD ratio β (max over pairs)", 5.2);
  c.xlabel("Smallest mutual Hill separation Δ (dashed: 2√3)");
  return c.finish().path;
}

}  // namespace apsides

// ---------------------------------------------------------------------------------------
// Completeness map and population panels (log-log axes).

namespace apsides {
namespace {

// Numbers 1, 2, 5 x 10^k beside a log10 y axis (as Canvas::log_numbers does under x).
void log_y_numbers(Canvas& c) {
  PLFLT x0, x1, y0, y1;
  c.p().gvpw(x0, x1, y0, y1);
  std::vector<double> values;
  for (std::initializer_list<double> mantissas : {std::initializer_list<double>{1.0, 2.0, 5.0},
                                                  std::initializer_list<double>{1.0, 1.5, 2.0, 3.0, 5.0, 7.0}}) {
    values.clear();
    for (int k = static_cast<int>(std::floor(y0)) - 1; k <= static_cast<int>(std::ceil(y1)); ++k)
      for (double m : mantissas) {
        const double v = m * std::pow(10.0, k);
        if (std::log10(v) >= y0 && std::log10(v) <= y1) values.push_back(v);
      }
    if (values.size() >= 3) break;
  }
  if (values.size() > 10) {
    values.erase(std::remove_if(values.begin(), values.end(),
                                [](double v) { return std::abs(std::log10(v) - std::round(std::log10(v))) > 1e-9; }),
                 values.end());
  }
  c.p().col0(kInk);
  for (double v : values) {
    const double pos = (std::log10(v) - y0) / (y1 - y0);
    c.p().mtex("lv", 0.8, pos, 1.0, fmt::format("{:g}", v).c_str());
  }
}

// Grid, frame and numbers of a panel whose world coordinates are log10 on both axes.
void log_log_axes(Canvas& c, bool x_numbers) {
  c.p().width(c.lw(1.0));
  c.p().col0(kGrid);
  c.p().box("gl", 0, 0, "gl", 0, 0);
  c.p().col0(kInk);
  c.set_text(0.9);
  c.p().box("bcstl", 0, 0, "bcstl", 0, 0);
  if (x_numbers) c.log_numbers();
  log_y_numbers(c);
  c.set_text(1.0);
}

// cmap1: white to Okabe-Ito blue to dark navy (as the corner plot's densities).
void density_colours(Canvas& c) {
  constexpr int n1 = 64;
  std::array<PLINT, n1> r{}, g{}, b{};
  for (int i = 0; i < n1; ++i) {
    const double t = static_cast<double>(i) / (n1 - 1);
    const double u = std::min(1.0, t * 1.4), w = std::max(0.0, (t - 0.714) / 0.286);
    r[i] = static_cast<PLINT>(std::lround((255 + (0 - 255) * u) * (1 - w) + 10 * w));
    g[i] = static_cast<PLINT>(std::lround((255 + (114 - 255) * u) * (1 - w) + 50 * w));
    b[i] = static_cast<PLINT>(std::lround((255 + (178 - 255) * u) * (1 - w) + 100 * w));
  }
  c.p().scmap1(r.data(), g.data(), b.data(), n1);
}

void fill_rect(Canvas& c, double x0, double x1, double y0, double y1) {
  PLFLT x[4] = {x0, x1, x1, x0}, y[4] = {y0, y0, y1, y1};
  c.p().fill(4, x, y);
}

void check_edges(const std::string& fig, const std::string& field, const std::vector<double>& e) {
  require(e.size() >= 2, fig, fmt::format("{} has {} values; it needs at least 2 (one cell)", field, e.size()));
  check_finite(fig, field, e);
  check_positive(fig, field, e);
  for (std::size_t i = 1; i < e.size(); ++i)
    if (!(e[i] > e[i - 1])) throw InputError(fmt::format("{}: {} must increase ({}[{}] = {} after {})", fig, field, field, i, e[i], e[i - 1]));
}

}  // namespace

FigureFile write_completeness_figure(const CompletenessFigureData& data, const std::string& path,
                                     const FigureOptions& options) {
  const std::string fig = "completeness figure";
  check_edges(fig, "period_edges_d", data.period_edges_d);
  check_edges(fig, "mass_edges", data.mass_edges);
  const std::size_t np = data.period_edges_d.size() - 1, nm = data.mass_edges.size() - 1;
  check_same_size(fig, "fraction", data.fraction, "cells (period cells x mass cells)", np * nm);
  for (std::size_t i = 0; i < data.fraction.size(); ++i)
    if (!std::isnan(data.fraction[i]) && !(data.fraction[i] >= 0.0 && data.fraction[i] <= 1.0))
      throw InputError(fmt::format("{}: fraction[{}] is {}; it must be in [0, 1] or NaN", fig, i, data.fraction[i]));
  require(data.contour_levels.size() <= 4, fig, fmt::format("{} contour levels; at most 4", data.contour_levels.size()));
  for (double l : data.contour_levels)
    require(l > 0.0 && l < 1.0, fig, fmt::format("contour level {} must be in (0, 1)", l));
  for (std::size_t i = 0; i < data.planets.size(); ++i)
    if (!(data.planets[i].x > 0) || !(data.planets[i].y > 0) || !std::isfinite(data.planets[i].x) || !std::isfinite(data.planets[i].y))
      throw InputError(fmt::format("{}: planets[{}] is ({}, {}); period and mass must be finite and > 0", fig, i,
                                   data.planets[i].x, data.planets[i].y));

  const double lx0 = std::log10(data.period_edges_d.front()), lx1 = std::log10(data.period_edges_d.back());
  const double ly0 = std::log10(data.mass_edges.front()), ly1 = std::log10(data.mass_edges.back());
  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const double top = c.title(options.title);
  std::vector<Canvas::LegendEntry> legend;
  for (std::size_t k = 0; k < data.contour_levels.size(); ++k)
    legend.push_back({fmt::format("{:g} % recovered", 100 * data.contour_levels[k]), kLevelColour[k], nullptr, kLevelStyle[k], 2.2});
  if (!data.planets.empty()) legend.push_back({"planets found", kVermillion, "★"});
  c.legend_row(legend, top - 0.9 * c.ch());
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 12.0 * c.cw();
  const Viewport v{left, right, 4.2 * c.ch(), top - 2.3 * c.ch()};
  density_colours(c);
  c.panel(v, lx0, lx1, ly0, ly1);
  for (std::size_t i = 0; i < np; ++i)
    for (std::size_t j = 0; j < nm; ++j) {
      const double f = data.fraction[i * nm + j];
      const double x0 = std::log10(data.period_edges_d[i]), x1 = std::log10(data.period_edges_d[i + 1]);
      const double y0 = std::log10(data.mass_edges[j]), y1 = std::log10(data.mass_edges[j + 1]);
      if (std::isnan(f)) c.p().col0(kGrid);
      else c.p().col1(f);
      fill_rect(c, x0, x1, y0, y1);
    }
  // Contours on the cell centres (in log coordinates); cells not computed count as 0.
  if (np >= 2 && nm >= 2 && !data.contour_levels.empty()) {
    std::vector<std::vector<double>> z(np, std::vector<double>(nm));
    std::vector<const PLFLT*> rows(np);
    std::vector<PLFLT> xg(np), yg(nm);
    for (std::size_t i = 0; i < np; ++i) {
      xg[i] = 0.5 * (std::log10(data.period_edges_d[i]) + std::log10(data.period_edges_d[i + 1]));
      for (std::size_t j = 0; j < nm; ++j) z[i][j] = std::isnan(data.fraction[i * nm + j]) ? 0.0 : data.fraction[i * nm + j];
      rows[i] = z[i].data();
    }
    for (std::size_t j = 0; j < nm; ++j) yg[j] = 0.5 * (std::log10(data.mass_edges[j]) + std::log10(data.mass_edges[j + 1]));
    PLcGrid grid{xg.data(), yg.data(), nullptr, static_cast<PLINT>(np), static_cast<PLINT>(nm), 0};
    for (std::size_t k = 0; k < data.contour_levels.size(); ++k) {
      PLFLT level = data.contour_levels[k];
      c.p().col0(kLevelColour[k]);
      c.p().lsty(kLevelStyle[k]);
      c.p().width(c.lw(2.2));
      c.p().cont(rows.data(), static_cast<PLINT>(np), static_cast<PLINT>(nm), 1, static_cast<PLINT>(np), 1,
                 static_cast<PLINT>(nm), &level, 1, plcallback::tr1, &grid);
      c.p().lsty(1);
    }
  }
  log_log_axes(c, true);
  for (const auto& pl : data.planets) {
    const double px = std::log10(pl.x), py = std::log10(pl.y);
    if (px < lx0 || px > lx1 || py < ly0 || py > ly1) continue;
    c.markers({px}, {py}, kVermillion, "★", 1.1);
    if (!pl.label.empty()) {
      c.set_text(0.85);
      c.p().col0(kInk);
      c.p().ptex(px + 0.012 * (lx1 - lx0), py + 0.02 * (ly1 - ly0), 1, 0, 0.0, esc(pl.label).c_str());
      c.set_text(1.0);
    }
  }
  c.ylabel(data.mass_label, 5.2);
  c.xlabel("Period [d]");
  // Colour bar.
  const Viewport bar{right + 2.0 * c.cw(), right + 4.0 * c.cw(), v.y0, v.y1};
  c.panel(bar, 0.0, 1.0, 0.0, 1.0);
  for (int k = 0; k < 100; ++k) {
    c.p().col1((k + 0.5) / 100.0);
    fill_rect(c, 0.0, 1.0, k / 100.0, (k + 1) / 100.0);
  }
  c.p().col0(kInk);
  c.set_text(0.85);
  c.p().box("bc", 0, 0, "bcmstv", 0.2, 0);
  c.set_text(1.0);
  c.p().mtex("r", 4.6, 0.5, 0.5, esc(data.value_label).c_str());
  return c.finish();
}

FigureFile write_population_figure(const PopulationFigureData& data, const std::string& path,
                                   const FigureOptions& options) {
  const std::string fig = "population figure";
  require(!data.period_d.empty(), fig, "no planets; it needs at least 1");
  check_finite(fig, "period_d", data.period_d);
  check_positive(fig, "period_d", data.period_d);
  check_same_size(fig, "mass", data.mass, "period_d", data.period_d.size());
  check_same_size(fig, "a_au", data.a_au, "period_d", data.period_d.size());
  for (std::size_t i = 0; i < data.mass.size(); ++i) {
    if (!std::isnan(data.mass[i]) && !(data.mass[i] > 0 && std::isfinite(data.mass[i])))
      throw InputError(fmt::format("{}: mass[{}] is {}; it must be > 0 or NaN", fig, i, data.mass[i]));
    if (!std::isnan(data.a_au[i]) && !(data.a_au[i] > 0 && std::isfinite(data.a_au[i])))
      throw InputError(fmt::format("{}: a_au[{}] is {}; it must be > 0 or NaN", fig, i, data.a_au[i]));
  }
  check_curve(fig, "line_period_d", data.line_period_d, "line_a_au", data.line_a_au);
  check_positive(fig, "line_period_d", data.line_period_d);
  check_positive(fig, "line_a_au", data.line_a_au);

  std::vector<double> lp, lm, pa, la;
  for (std::size_t i = 0; i < data.period_d.size(); ++i) {
    if (!std::isnan(data.mass[i])) {
      lp.push_back(std::log10(data.period_d[i]));
      lm.push_back(std::log10(data.mass[i]));
    }
    if (!std::isnan(data.a_au[i])) {
      pa.push_back(std::log10(data.period_d[i]));
      la.push_back(std::log10(data.a_au[i]));
    }
  }
  Range xr;
  xr.add(log10_of(data.period_d));
  xr = xr.padded(0.08);
  Range mr, ar;
  mr.add(lm);
  mr = mr.padded(0.1);
  ar.add(la);
  std::vector<double> lx = log10_of(data.line_period_d), ly = log10_of(data.line_a_au);
  sort_by_x(lx, ly);
  ar = ar.padded(0.1);

  std::lock_guard<std::mutex> lock(plplot_mutex());
  Canvas c(path, options, fig);
  const double top = c.title(options.title);
  std::vector<Canvas::LegendEntry> legend{{"planet", kBlue, "●"}};
  if (!lx.empty()) legend.push_back({data.line_label.empty() ? "reference" : data.line_label, kVermillion, nullptr, 2, 2.0});
  c.legend_row(legend, top - 0.9 * c.ch());
  const double left = 0.03 + 7.5 * c.cw(), right = 1.0 - 2.5 * c.cw();
  const auto vp = stack(left, right, 4.2 * c.ch(), top - 2.3 * c.ch(), {1.0, 1.0}, 1.2 * c.ch());
  c.panel(vp[0], xr.lo, xr.hi, mr.lo, mr.hi);
  log_log_axes(c, false);
  c.markers(lp, lm, kBlue, "●");
  c.ylabel(data.mass_label, 5.2);
  c.panel(vp[1], xr.lo, xr.hi, ar.lo, ar.hi);
  log_log_axes(c, true);
  if (lx.size() >= 2) {
    std::vector<double> cx, cy;  // the curve inside the panel only
    for (std::size_t i = 0; i < lx.size(); ++i)
      if (lx[i] >= xr.lo && lx[i] <= xr.hi && ly[i] >= ar.lo && ly[i] <= ar.hi) {
        cx.push_back(lx[i]);
        cy.push_back(ly[i]);
      }
    c.polyline(cx, cy, kVermillion, 2.0, 2);
  }
  c.markers(pa, la, kBlue, "●");
  c.ylabel("Semi-major axis a [au]", 5.2);
  c.xlabel("Period [d]");
  return c.finish();
}

}  // namespace apsides
