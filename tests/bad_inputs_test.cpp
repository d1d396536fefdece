// Malformed inputs a new user hits, each with its one-line message pinned: the message
// names the file:line (or the TOML key) and states the rule. A few inputs that look odd
// but are fine (UTF-8 BOM, CRLF line ends, quoted fields) are checked to read exactly
// like a clean file.
#include <doctest/doctest.h>

#include <filesystem>
#include <string>

#include "apsides/data.h"
#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "apsides/project.h"
#include "test_support.h"

namespace {
namespace fs = std::filesystem;
using apsides::InputError;

// A scratch directory; messages are returned with its path replaced by "DIR".
struct Scratch {
  std::string dir;
  explicit Scratch(const std::string& name) : dir(apsides::test::temp_dir("bad_inputs/" + name)) {}
  std::string write(const std::string& name, const std::string& content) const {
    return apsides::test::write_text(dir, name, content);
  }
  template <class F>
  std::string error_of(F&& f) const {
    try {
      f();
    } catch (const InputError& e) {
      std::string m = e.what();
      for (std::size_t p; (p = m.find(dir)) != std::string::npos;) m.replace(p, dir.size(), "DIR");
      return m;
    } catch (const std::exception& e) {
      return std::string("not an InputError: ") + e.what();
    }
    return "no error";
  }
  std::string velocity_error(const std::string& content, const apsides::VelocityFileOptions& o = {}) const {
    const std::string p = write("rv.csv", content);
    return error_of([&] { apsides::load_velocities({p}, {o}); });
  }
  std::string transit_error(const std::string& content) const {
    const std::string p = write("tt.csv", content);
    return error_of([&] { apsides::read_transit_file(p); });
  }
  // Parses a project text (data paths relative to the scratch directory).
  std::string project_error(const std::string& text) const {
    return error_of([&] { apsides::parse_project(text, "project.toml", dir); });
  }
};

}  // namespace

TEST_SUITE("bad_inputs") {

TEST_CASE("an empty file or one holding only comments is rejected as having no data rows") {
  Scratch s("empty");
  CHECK(s.velocity_error("") == "DIR/rv.csv: file is empty (no data rows)");
  CHECK(s.velocity_error("# only a comment\n\n   \n") == "DIR/rv.csv: file is empty (no data rows)");
}

TEST_CASE("a header row without data rows is rejected") {
  Scratch s("header_only");
  CHECK(s.velocity_error("time,rv,err\n") == "DIR/rv.csv: has a header but no data rows");
}

TEST_CASE("a row with too few columns names its line and the columns needed") {
  Scratch s("few_columns");
  CHECK(s.velocity_error("2459000.5,1.0,0.5\n2459001.5,2.0\n") ==
        "DIR/rv.csv:2: has 2 columns; a velocity file needs time, velocity, uncertainty (and "
        "optionally an instrument label)");
}

TEST_CASE("rows of different lengths are rejected naming both lines") {
  Scratch s("ragged");
  CHECK(s.velocity_error("2459000.5 1.0 0.5 north\n2459001.5 2.0 0.5\n") ==
        "DIR/rv.csv:2: has 3 columns; line 1 has 4");
}

TEST_CASE("a header naming a different number of columns than the data is rejected") {
  Scratch s("header_mismatch");
  CHECK(s.velocity_error("t,v,e\n2459000.5,1.0,0.5,north\n") ==
        "DIR/rv.csv:2: has 4 columns but the header names 3");
}

TEST_CASE("text where a number belongs is rejected naming the column's meaning") {
  Scratch s("text_number");
  CHECK(s.velocity_error("2459000.5,1.0,0.5\n2459001.5,abc,0.5\n") ==
        "DIR/rv.csv:2: velocity is 'abc'; it must be a number");
  CHECK(s.velocity_error("2459000.5,1.0,0.5\n2459001.5x,1.0,0.5\n") ==
        "DIR/rv.csv:2: time is '2459001.5x'; it must be a number");
}

TEST_CASE("NaN and infinity are rejected as non-finite") {
  Scratch s("nan_inf");
  CHECK(s.velocity_error("2459000.5,nan,0.5\n") ==
        "DIR/rv.csv:1: velocity is 'nan'; it must be a finite number");
  CHECK(s.velocity_error("2459000.5,1.0,inf\n") ==
        "DIR/rv.csv:1: uncertainty is 'inf'; it must be a finite number");
  CHECK(s.velocity_error("-Infinity,1.0,0.5\n") ==
        "DIR/rv.csv:1: time is '-Infinity'; it must be a finite number");
}

TEST_CASE("zero and negative velocity uncertainties are rejected") {
  Scratch s("sigma");
  CHECK(s.velocity_error("2459000.5,1.0,0\n") == "DIR/rv.csv:1: uncertainty is 0; it must be > 0");
  CHECK(s.velocity_error("2459000.5,1.0,-0.4\n") ==
        "DIR/rv.csv:1: uncertainty is -0.4; it must be > 0");
}

TEST_CASE("a time observed twice by one instrument is kept with a warning, or refused with repeats = \"error\"") {
  Scratch s("duplicate_time");
  const std::string text = "2459000.5,1.0,0.5\n2459001.5,2.0,0.5\n2459000.5,3.0,0.5\n";
  const std::string p = s.write("rv.csv", text);
  apsides::VelocityData d;
  REQUIRE_NOTHROW(d = apsides::load_velocities({p}, {{}}));
  CHECK(d.size() == 3);
  REQUIRE(d.warnings.size() == 1);
  CHECK(d.warnings[0] == p + ": 1 repeated (time, instrument) pair, every point kept: lines 1 and 3 (time 2459000.5, "
                             "'rv') (repeats = \"average\" merges them, \"error\" refuses them)");
  apsides::VelocityFileOptions strict;
  strict.repeats = apsides::RepeatPolicy::kError;
  CHECK(s.velocity_error(text, strict) ==
        "DIR/rv.csv:3: time 2459000.5 repeats DIR/rv.csv:1 for instrument 'rv' (repeats = \"error\"; \"keep\" or "
        "\"average\" accept it)");
  // The same through a project.
  const std::string toml = s.write("project.toml", "[[velocities]]\nfile = \"rv.csv\"\nrepeats = \"error\"\n");
  CHECK(s.error_of([&] { apsides::load_project(toml).load_velocities(); }) ==
        "DIR/rv.csv:3: time 2459000.5 repeats DIR/rv.csv:1 for instrument 'rv' (repeats = \"error\"; \"keep\" or "
        "\"average\" accept it)");
}

TEST_CASE("an unknown repeats value is rejected with the three accepted ones") {
  Scratch s("repeats_value");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\nrepeats = \"avg\"\n") ==
        "project.toml:3: velocities.repeats is 'avg'; it must be \"keep\", \"average\" or \"error\"");
}

TEST_CASE("a reduced time without a declared offset is rejected naming the common offsets") {
  Scratch s("reduced_time");
  CHECK(s.velocity_error("1408.853661,-5678.7,2.3\n") ==
        "DIR/rv.csv:1: time 1408.853661 looks reduced (a full BJD is 2400000 to 2500000): declare the offset that "
        "was subtracted, time_offset in [[velocities]] or --time-offset; here 2457000 or 2450000 give a date in "
        "1968-2050 (common offsets: 2457000, 2450000, 2400000, 2400000.5 = MJD; 0 keeps times as given)");
  CHECK(s.velocity_error("59000.5,1.0,0.5\n") ==
        "DIR/rv.csv:1: time 59000.5 looks reduced (a full BJD is 2400000 to 2500000): declare the offset that was "
        "subtracted, time_offset in [[velocities]] or --time-offset; here 2400000 or 2400000.5 give a date in "
        "1968-2050 (common offsets: 2457000, 2450000, 2400000, 2400000.5 = MJD; 0 keeps times as given)");
  CHECK(s.velocity_error("250000.5,1.0,0.5\n") ==
        "DIR/rv.csv:1: time 250000.5 looks reduced (a full BJD is 2400000 to 2500000): declare the offset that was "
        "subtracted, time_offset in [[velocities]] or --time-offset; here no common offset gives a date in "
        "1968-2050 (common offsets: 2457000, 2450000, 2400000, 2400000.5 = MJD; 0 keeps times as given)");
  CHECK(s.velocity_error("3459000.5,1.0,0.5\n") ==
        "DIR/rv.csv:1: time 3459000.5 is not a BJD_TDB (a full BJD is 2400000 to 2500000)");
  CHECK(s.transit_error("0,13408.2,0.001\n") ==
        "DIR/tt.csv:1: mid-transit time 13408.2 looks reduced (a full BJD is 2400000 to 2500000): declare the offset "
        "that was subtracted, time_offset in [[transits]] or --time-offset; here 2450000 gives a date in 1968-2050 "
        "(common offsets: 2457000, 2450000, 2400000, 2400000.5 = MJD; 0 keeps times as given)");
}

TEST_CASE("a time offset given twice, or one that does not make a full BJD, is rejected") {
  Scratch s("offset_twice");
  apsides::VelocityFileOptions tess;
  tess.time_offset_days = 2457000.0;
  CHECK(s.velocity_error("2459000.5,1.0,0.5\n", tess) ==
        "DIR/rv.csv:1: time 2459000.5 is already a full BJD, but time_offset = 2457000 is declared for this file (the "
        "offset would count twice); drop time_offset or --time-offset");
  CHECK(s.velocity_error("59000.5,1.0,0.5\n", tess) ==
        "DIR/rv.csv:1: time 59000.5 + time_offset 2457000 = 2516000.500000 is not a full BJD (2400000 to 2500000); "
        "check time_offset");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\ntime_offset = -2457000\n") ==
        "project.toml:3: velocities.time_offset is -2457000; it must be between 0 and 2500000 (the day subtracted "
        "from BJD, e.g. 2457000)");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\ntime_offset = \"2457000\"\n") ==
        "project.toml:3: velocities.time_offset must be a number");
  // The project's offset and a different --time-offset: exit 2 naming both.
  s.write("rv.dat", "1408.853661 -5678.7 2.3\n1409.844622 -5678.9 2.4\n1412.858886 -5679.1 2.2\n");
  const std::string toml = s.write("project.toml", "[[velocities]]\nfile = \"rv.dat\"\ntime_offset = 2457000\n");
  const auto r = apsides::test::run_command(apsides::test::apsides_binary() + " scan " + toml + " --time-offset 2450000");
  CHECK(r.status == 2);
  CHECK(r.output.find("--time-offset 2450000: the [[velocities]] block at " + toml +
                      ":2 declares time_offset = 2457000 for " + s.dir + "/rv.dat; the offset is given twice (keep "
                      "one)") != std::string::npos);
}

TEST_CASE("an empty indicator cell is a missing value; an indicator empty on every row is rejected") {
  Scratch s("indicator_empty");
  const std::string gaps = "t,v,e,sval\n2459000.5,1.0,0.5,\n2459001.5,2.0,0.5,0.2\n";
  CHECK(s.velocity_error(gaps) == "no error");
  s.write("rv.csv", "t,v,e,sval\n2459000.5,1.0,0.5,\n2459001.5,2.0,0.5,\n");
  const auto named = [&](const std::string& extra) {
    return s.error_of([&] {
      apsides::parse_project("[[velocities]]\nfile = \"rv.csv\"\n" + extra, "project.toml", s.dir).load_velocities();
    });
  };
  CHECK(named("indicators = [\"sval\"]\n") ==
        "DIR/rv.csv: column 'sval' (named by indicators at project.toml:2) is empty on every row");
  // Not named: the empty column is left out, with a warning.
  apsides::VelocityData d;
  REQUIRE_NOTHROW(d = apsides::load_velocities({s.dir + "/rv.csv"}, {{}}));
  CHECK(d.indicators.empty());
  REQUIRE(d.warnings.size() == 1);
  CHECK(d.warnings[0] == s.dir + "/rv.csv: column(s) empty on every row, not kept: sval");
}

TEST_CASE("indicators naming a column the file does not have, or a main column, are rejected") {
  Scratch s("indicator_missing");
  s.write("rv.csv", "t,v,e,sval\n2459000.5,1.0,0.5,0.1\n2459001.5,2.0,0.5,0.2\n");
  const auto named = [&](const std::string& extra) {
    return s.error_of([&] {
      apsides::parse_project("[[velocities]]\nfile = \"rv.csv\"\n" + extra, "project.toml", s.dir).load_velocities();
    });
  };
  CHECK(named("indicators = [\"sval\", \"fwhm\"]\n") ==
        "DIR/rv.csv: has no column 'fwhm' (named by indicators at project.toml:2); its columns are: t, v, e, sval");
  CHECK(named("indicators = [\"t\"]\n") ==
        "DIR/rv.csv: column 't' (named by indicators at project.toml:2) is the time column; indicators are the columns "
        "after time, velocity, uncertainty and instrument");
  CHECK(named("columns = [\"t\", \"v\", \"e\"]\n") == "DIR/rv.csv:2: has 4 columns but columns at project.toml:2 names 3");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\nindicators = \"sval\"\n") ==
        "project.toml:3: velocities.indicators must be a list of strings like [\"a\", \"b\"]");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\nindicators = [\"sval\", \"sval\"]\n") ==
        "project.toml:3: velocities.indicators names 'sval' twice");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\ncolumns = [\"t\", \"v\"]\n") ==
        "project.toml:3: velocities.columns names 2 column(s); it must name every column of the file, at least "
        "time, velocity and uncertainty");
}

TEST_CASE("bad indicator values are rejected naming the column; main columns may not be empty") {
  Scratch s("indicator_values");
  CHECK(s.velocity_error("t,v,e,sval\n2459000.5,1.0,0.5,0.1\n2459001.5,1.0,0.5,abc\n") ==
        "DIR/rv.csv:3: sval (column 4) is 'abc'; it must be a number");
  CHECK(s.velocity_error("t,v,e,sval,sval_err\n2459000.5,1.0,0.5,0.1,-0.01\n") ==
        "DIR/rv.csv:2: sval_err (column 5) is -0.01; an uncertainty must be >= 0");
  CHECK(s.velocity_error("t,v,e,sval\n2459000.5,,0.5,0.1\n") == "DIR/rv.csv:2: column 2 is empty");
  CHECK(s.velocity_error("t,v,e,inst\n2459000.5,1.0,0.5,\n2459001.5,1.0,0.5,north\n") == "DIR/rv.csv:2: column 4 is empty");
}

TEST_CASE("comma and whitespace delimiters mixed across lines are rejected") {
  Scratch s("mixed_lines");
  CHECK(s.velocity_error("2459000.5,1.0,0.5\n2459001.5 2.0 0.5\n") ==
        "DIR/rv.csv:2: mixed delimiters: this line is whitespace-separated but line 1 is "
        "comma-separated");
}

TEST_CASE("comma and blank delimiters mixed within one line are rejected") {
  Scratch s("mixed_within");
  CHECK(s.velocity_error("2459000.5,1.0 0.5\n") ==
        "DIR/rv.csv:1: mixed delimiters: column 2 ('1.0 0.5') holds blank-separated numbers in "
        "a comma-separated line; use one kind of delimiter per file");
}

TEST_CASE("a semicolon-separated file is rejected with the delimiters that work") {
  Scratch s("semicolon");
  CHECK(s.velocity_error("2459000,5;1,0;0,5\n") ==
        "DIR/rv.csv:1: is semicolon-separated; separate columns with commas, tabs or spaces "
        "(and use '.' as the decimal point)");
}

TEST_CASE("an empty field between commas, or a trailing comma, is rejected") {
  Scratch s("empty_field");
  CHECK(s.velocity_error("2459000.5,,0.5\n") == "DIR/rv.csv:1: column 2 is empty");
  CHECK(s.velocity_error("2459000.5,1.0,0.5,\n") == "DIR/rv.csv:1: column 4 is empty");
}

TEST_CASE("UTF-16 and binary files are rejected as not plain text") {
  Scratch s("encoding");
  std::string utf16 = "\xFF\xFE";
  for (char c : std::string("2459000.5,1.0,0.5\n")) {
    utf16.push_back(c);
    utf16.push_back('\0');
  }
  CHECK(s.velocity_error(utf16) == "DIR/rv.csv: is UTF-16 encoded; save it as plain text (ASCII or UTF-8)");
  CHECK(s.velocity_error(std::string("\x89PNG\r\n\x1a\n\0\0\0\rIHDR", 16)) ==
        "DIR/rv.csv: contains NUL bytes; it is not a text table");
}

TEST_CASE("a missing file and a directory given as a file are rejected") {
  Scratch s("paths");
  CHECK(s.error_of([&] { apsides::read_velocity_file(s.dir + "/nope.csv", {}); }) ==
        "DIR/nope.csv: no such file");
  fs::create_directories(s.dir + "/sub");
  CHECK(s.error_of([&] { apsides::read_velocity_file(s.dir + "/sub", {}); }) ==
        "DIR/sub: is a directory, not a data file");
  CHECK(s.error_of([&] { apsides::read_transit_file(s.dir + "/sub"); }) ==
        "DIR/sub: is a directory, not a data file");
}

TEST_CASE("two text columns after the numbers are rejected: one instrument label per row") {
  Scratch s("two_labels");
  CHECK(s.velocity_error("2459000.5,1.0,0.5,north,night1\n") ==
        "DIR/rv.csv:1: columns 4 and 5 are both text; a velocity file has one instrument label column");
}

TEST_CASE("a number in the instrument column is rejected") {
  Scratch s("numeric_label");
  CHECK(s.velocity_error("2459000.5 1.0 0.5 north\n2459001.5 1.0 0.5 7\n") ==
        "DIR/rv.csv:2: column 4 is '7'; it must be an instrument label (text) as on line 1");
}

TEST_CASE("a per-file instrument that contradicts the file's instrument column is rejected") {
  Scratch s("label_conflict");
  apsides::VelocityFileOptions o;
  o.instrument = "north";
  CHECK(s.velocity_error("2459000.5,1.0,0.5,south\n", o) ==
        "DIR/rv.csv:1: instrument column says 'south' but the file is given instrument 'north'; "
        "drop the per-file instrument or the column");
  // The same label twice is no conflict.
  CHECK(s.velocity_error("2459000.5,1.0,0.5,north\n", o) == "no error");
}

TEST_CASE("huge values are rejected: beyond double range, faster than light, times not in days") {
  Scratch s("huge");
  CHECK(s.velocity_error("2459000.5,1e400,0.5\n") == "DIR/rv.csv:1: velocity is '1e400'; it is out of range");
  CHECK(s.velocity_error("2459000.5,4e8,0.5\n") ==
        "DIR/rv.csv:1: velocity is 4e8 m/s; it must be below the speed of light");
  apsides::VelocityFileOptions kms;
  kms.unit = apsides::VelocityUnit::kKilometersPerSecond;
  CHECK(s.velocity_error("2459000.5,1.0,3e5\n", kms) ==
        "DIR/rv.csv:1: uncertainty is 3e5 km/s; it must be below the speed of light");
  CHECK(s.velocity_error("2.12e11,1.0,0.5\n") ==
        "DIR/rv.csv:1: time is 2.12e11; it must be a BJD_TDB in days (|t| < 1e7)");
}

TEST_CASE("files mixing full BJD and reduced times are rejected") {
  Scratch s("full_vs_reduced");
  const std::string a = s.write("a.csv", "2459000.5,1.0,0.5\n2459010.5,1.0,0.5\n");
  const std::string b = s.write("b.csv", "59005.5,1.0,0.5\n");
  apsides::VelocityFileOptions as_given;  // time_offset = 0: b's times are kept as they are
  as_given.time_offset_days = 0.0;
  CHECK(s.error_of([&] { apsides::load_velocities({a, b}, {{}, as_given}); }) ==
        "DIR/b.csv:1: time 59005.5 and DIR/a.csv:2: time 2459010.5 are 2400005 days apart; are "
        "some times full BJD and others reduced (BJD - 2400000 or similar)? Give every file the "
        "same kind");
}

TEST_CASE("km/s declared on data that look like m/s is read but warned about") {
  Scratch s("unit_warning");
  const std::string p = s.write("rv.csv", "2459000.5,-12.0,2.1\n2459001.5,-10.0,1.9\n");
  apsides::VelocityFileOptions kms;
  kms.unit = apsides::VelocityUnit::kKilometersPerSecond;
  apsides::VelocityData d;
  REQUIRE_NOTHROW(d = apsides::load_velocities({p}, {kms}));
  CHECK(d.velocity_m_s[0] == doctest::Approx(-12000.0));
  REQUIRE(d.warnings.size() == 1);
  CHECK(d.warnings[0] ==
        p + ": declared km/s, but the median uncertainty is 2.1 km/s; these look like m/s (check velocity_unit)");
  // And the reverse: km/s-sized numbers read as m/s.
  const std::string q = s.write("kms.csv", "2459000.5,46.30911,0.00255\n2459001.5,46.21963,0.00165\n");
  d = apsides::load_velocities({q}, {{}});
  REQUIRE(d.warnings.size() == 1);
  CHECK(d.warnings[0].find("these look like km/s") != std::string::npos);
}

TEST_CASE("a non-integer transit epoch is rejected") {
  Scratch s("epoch_fraction");
  CHECK(s.transit_error("0,2459000.10,0.001\n1.5,2459003.60,0.001\n") ==
        "DIR/tt.csv:2: epoch is 1.5; it must be an integer transit number");
}

TEST_CASE("a duplicated transit row is rejected") {
  Scratch s("epoch_duplicate");
  CHECK(s.transit_error("0,2459000.10,0.001\n3,2459010.40,0.001\n3,2459010.40,0.001\n") ==
        "DIR/tt.csv:3: epoch 3 repeats DIR/tt.csv:2 with the same time; a duplicated row");
}

TEST_CASE("a repeated epoch whose times disagree is rejected as a probable epoch typo") {
  Scratch s("epoch_typo");
  CHECK(s.transit_error("0,2459000.10,0.001\n3,2459010.40,0.001\n3,2459013.83,0.001\n") ==
        "DIR/tt.csv:3: epoch 3 repeats DIR/tt.csv:2 but the times differ by 3.430000 d (2425.4 "
        "sigma); two measurements of one transit must agree within 5 sigma (is an epoch number "
        "wrong?)");
}

TEST_CASE("zero, negative and minute-sized transit uncertainties are rejected") {
  Scratch s("transit_sigma");
  CHECK(s.transit_error("0,2459000.10,0\n") == "DIR/tt.csv:1: uncertainty is 0; it must be > 0 (days)");
  CHECK(s.transit_error("0,2459000.10,-0.001\n") == "DIR/tt.csv:1: uncertainty is -0.001; it must be > 0 (days)");
  CHECK(s.transit_error("0,2459000.10,1.5\n") ==
        "DIR/tt.csv:1: uncertainty is 1.5 days; it must be below 1 day (transit-time errors are in "
        "days, not minutes)");
}

TEST_CASE("a transit file with two columns is rejected") {
  Scratch s("transit_columns");
  CHECK(s.transit_error("0 2459000.10\n") ==
        "DIR/tt.csv:1: has 2 columns; a transit-time file needs epoch, mid-transit time, "
        "uncertainty (and optionally a planet label)");
}

TEST_CASE("an unknown TOML key is rejected with the list of known keys") {
  Scratch s("toml_unknown");
  CHECK(s.project_error("[star]\ncolour = \"red\"\n[[velocities]]\nfile = \"rv.csv\"\n") ==
        "project.toml:2: unknown key 'star.colour' (known: mass_err_msun, mass_msun, name, "
        "radius_err_rsun, radius_rsun)");
}

TEST_CASE("a mistyped TOML key is rejected with the right key suggested") {
  Scratch s("toml_typo");
  CHECK(s.project_error("[star]\nmass_mson = 0.9\n[[velocities]]\nfile = \"rv.csv\"\n") ==
        "project.toml:2: unknown key 'star.mass_mson'; did you mean 'mass_msun'?");
  CHECK(s.project_error("[[velocity]]\nfile = \"rv.csv\"\n") ==
        "project.toml:1: unknown key 'velocity'; did you mean 'velocities'?");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\nvelocity_units = \"km/s\"\n") ==
        "project.toml:3: unknown key 'velocities.velocity_units'; did you mean 'velocity_unit'?");
}

TEST_CASE("a TOML syntax error is reported with its line and column") {
  Scratch s("toml_syntax");
  const std::string m = s.project_error("[[velocities]]\nfile = \"rv.csv\n");
  CHECK(m.rfind("project.toml:2:", 0) == 0);
  CHECK(m.find("TOML syntax error") != std::string::npos);
  CHECK(m.find('\n') == std::string::npos);
}

TEST_CASE("a value of the wrong type is rejected naming the key") {
  Scratch s("toml_type");
  CHECK(s.project_error("[star]\nmass_msun = \"0.9\"\n[[velocities]]\nfile = \"rv.csv\"\n") ==
        "project.toml:2: star.mass_msun must be a number");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\n[model]\nplanets = 1.5\n") ==
        "project.toml:4: model.planets must be an integer");
}

TEST_CASE("impossible prior bounds are rejected naming the prior") {
  Scratch s("prior_bounds");
  const std::string head = "[[velocities]]\nfile = \"rv.csv\"\n[priors]\n";
  CHECK(s.project_error(head + "\"b.period_d\" = { dist = \"uniform\", min = 10, max = 5 }\n") ==
        "project.toml:4: priors.b.period_d: impossible prior: min = 10 is not below max = 5");
  CHECK(s.project_error(head + "\"b.K_ms\" = { dist = \"log-uniform\", min = 0, max = 100 }\n") ==
        "project.toml:4: priors.b.K_ms: impossible prior: min = 0; a log-uniform prior needs min > 0");
  CHECK(s.project_error(head + "\"b.K_ms\" = { dist = \"normal\", mean = 5, sd = -1 }\n") ==
        "project.toml:4: priors.b.K_ms: impossible prior: sd = -1; it must be > 0");
  CHECK(s.project_error(head + "\"b.K_ms\" = { dist = \"uniform\", min = 0 }\n") ==
        "project.toml:4: priors.b.K_ms: a uniform prior needs min and max");
}

TEST_CASE("a star mass of zero or below, and a mass error not below the mass, are rejected") {
  Scratch s("star_mass");
  const std::string tail = "[[velocities]]\nfile = \"rv.csv\"\n";
  CHECK(s.project_error("[star]\nmass_msun = 0\n" + tail) == "project.toml:2: star.mass_msun is 0; it must be > 0");
  CHECK(s.project_error("[star]\nmass_msun = -1.1\n" + tail) ==
        "project.toml:2: star.mass_msun is -1.1; it must be > 0");
  CHECK(s.project_error("[star]\nmass_msun = 0.8\nmass_err_msun = 0.8\n" + tail) ==
        "project.toml:3: star.mass_err_msun is 0.8; it must be below star.mass_msun = 0.8");
  CHECK(s.project_error("[star]\nmass_msun = 0.8\nmass_err_msun = -0.1\n" + tail) ==
        "project.toml:3: star.mass_err_msun is -0.1; it must be >= 0");
}

TEST_CASE("a [[velocities]] block with an empty or absent file key is rejected") {
  Scratch s("file_key");
  CHECK(s.project_error("[[velocities]]\nfile = \"\"\n") ==
        "project.toml:2: velocities.file: is empty; it must name a velocity file");
  CHECK(s.project_error("[[velocities]]\ninstrument = \"north\"\n") ==
        "project.toml:1: [[velocities]] block needs a 'file' key");
  CHECK(s.project_error("[velocities]\nfile = \"rv.csv\"\n") ==
        "project.toml:1: velocities must be written [[velocities]] (one block per file), not [velocities]");
  CHECK(s.project_error("[star]\nmass_msun = 1.0\n") ==
        "project.toml: no [[velocities]] block; a project needs at least one velocity file");
}

TEST_CASE("an unknown velocity unit is rejected with the two accepted spellings") {
  Scratch s("unit");
  CHECK(s.project_error("[[velocities]]\nfile = \"rv.csv\"\nvelocity_unit = \"kms\"\n") ==
        "project.toml:3: velocities.velocity_unit: velocity unit is 'kms'; it must be \"m/s\" or \"km/s\"");
}

TEST_CASE("a velocity file missing next to the project is reported with the project line naming it") {
  Scratch s("relative_missing");
  fs::create_directories(s.dir + "/proj");
  const std::string toml = s.write("proj/project.toml", "[star]\nmass_msun = 1\n\n[[velocities]]\nfile = \"data/rv.csv\"\n");
  CHECK(s.error_of([&] { apsides::load_project(toml).load_velocities(); }) ==
        "DIR/proj/data/rv.csv: no such file (named by velocities.file at DIR/proj/project.toml:5)");
}

TEST_CASE("a prior on an instrument that is not in the data is rejected naming the instruments present") {
  Scratch s("unknown_instrument");
  s.write("rv.csv", "2459000.5,1.0,0.5,north\n2459001.5,2.0,0.5,north\n");
  const std::string toml = s.write("project.toml",
                                   "[[velocities]]\nfile = \"rv.csv\"\n\n[priors]\n"
                                   "\"south.jitter_ms\" = { dist = \"half-normal\", sd = 3 }\n");
  CHECK(s.error_of([&] { apsides::load_project(toml).load_velocities(); }) ==
        "DIR/project.toml:5: priors.south.jitter_ms names instrument 'south', which is not in the data "
        "(instruments: 'north')");
}

TEST_CASE("too few points for the model are rejected: n must exceed the free parameters") {
  Scratch s("too_few");
  const std::string p = s.write("rv.csv",
                                "2459000.5,1,1,A\n2459001.5,2,1,A\n2459002.5,3,1,A\n2459003.5,1,1,A\n"
                                "2459004.5,2,1,A\n2459005.5,2,1,B\n2459006.5,2,1,B\n");
  const apsides::VelocityData d = apsides::load_velocities({p}, {{}});
  apsides::ModelLayout layout;
  layout.n_planets = 1;
  layout.n_instruments = 2;  // 5 planet + 2 x (offset, jitter) = 9 > 7 points
  CHECK(s.error_of([&] { apsides::check_enough_points(d, layout); }) ==
        "DIR/rv.csv: 7 velocities are too few for a model with 1 planet(s), 2 instrument(s) with jitter: it has "
        "9 free parameters and needs more than 9 points");
  layout.fit_jitter = false;  // 7 parameters: still not more points than parameters
  CHECK(s.error_of([&] { apsides::check_enough_points(d, layout); }) ==
        "DIR/rv.csv: 7 velocities are too few for a model with 1 planet(s), 2 instrument(s): it has 7 free "
        "parameters and needs more than 7 points");
  layout.n_planets = 0;
  layout.trend = apsides::Trend::kQuadratic;  // 4 parameters
  CHECK(s.error_of([&] { apsides::check_enough_points(d, layout); }) == "no error");
  // One point through the command line: the file is named, exit 2.
  const std::string one = s.write("one.csv", "2459000.5,1,1\n");
  for (const std::string cmd : {" fit ", " scan "}) {
    const auto r = apsides::test::run_command(apsides::test::apsides_binary() + cmd + one);
    CHECK(r.status == 2);
    CHECK(r.output.find(one + ": 1 ") != std::string::npos);
  }
}

TEST_CASE("an instrument with a single point cannot have its own offset and jitter") {
  Scratch s("one_point");
  const std::string p = s.write("rv.csv", "2459000.5,1,1,A\n2459001.5,2,1,A\n2459002.5,3,1,A\n2459003.5,1,1,B\n"
                                          "2459004.5,1,1,A\n2459005.5,2,1,A\n2459006.5,3,1,A\n");
  const apsides::VelocityData d = apsides::load_velocities({p}, {{}});
  apsides::ModelLayout layout;
  layout.n_instruments = 2;
  CHECK(s.error_of([&] { apsides::check_enough_points(d, layout); }) ==
        "instrument 'B' has 1 velocity; an instrument with its own offset and jitter needs at least 2 "
        "points (or drop jitter fitting)");
}

TEST_CASE("other project values out of range are rejected naming the key") {
  Scratch s("ranges");
  const std::string head = "[[velocities]]\nfile = \"rv.csv\"\n";
  CHECK(s.project_error(head + "[[transits]]\nfile = \"t.csv\"\nplanet = \"B\"\n") ==
        "project.toml:5: transits.planet is 'B'; planets are labelled b, c, d, ... (a letter from b to z)");
  CHECK(s.project_error(head + "[model]\nplanets = -1\n") == "project.toml:4: model.planets is -1; it must be between 0 and 10");
  CHECK(s.project_error(head + "[sampler]\nwalkers = 3\n") ==
        "project.toml:4: sampler.walkers is 3; it must be an even number >= 4 (or 0 for automatic)");
  CHECK(s.project_error(head + "[search]\nmin_period_d = 50\nmax_period_d = 5\n") ==
        "project.toml: search.min_period_d = 50 is not below search.max_period_d = 5");
  CHECK(s.project_error(head + "[velocities.extra]\n") != "no error");
}

TEST_CASE("a project path that is missing or a directory is rejected") {
  Scratch s("project_path");
  CHECK(s.error_of([&] { apsides::load_project(s.dir + "/none.toml"); }) == "DIR/none.toml: no such file");
  CHECK(s.error_of([&] { apsides::load_project(s.dir); }) == "DIR: is a directory, not a project file");
}

TEST_CASE("a UTF-8 byte-order mark, CRLF line ends and quoted fields read exactly like a clean file") {
  Scratch s("accepted");
  const std::string clean = "# t, v, e\ntime,rv,err\n2459000.123456789,-12.5,1.5\n2459001.5,3.25,0.75\n";
  std::string crlf;
  for (char c : clean) {
    if (c == '\n') crlf += '\r';
    crlf += c;
  }
  const std::string quoted =
      "\"time\",\"rv\",\"err\"\n\"2459000.123456789\",\"-12.5\",\"1.5\"\n\"2459001.5\",\"3.25\",\"0.75\"\n";
  const apsides::VelocityFileOptions o{"north", apsides::VelocityUnit::kMetersPerSecond};
  const auto ref = apsides::load_velocities({s.write("clean.csv", clean)}, {o});
  for (const std::string& variant : {"\xEF\xBB\xBF" + clean, crlf, "\xEF\xBB\xBF" + crlf, quoted}) {
    const auto d = apsides::load_velocities({s.write("variant.csv", variant)}, {o});
    CHECK(d.reference_epoch_bjd == ref.reference_epoch_bjd);
    CHECK(d.time_days == ref.time_days);  // exact
    CHECK(d.velocity_m_s == ref.velocity_m_s);
    CHECK(d.uncertainty_m_s == ref.uncertainty_m_s);
    CHECK(d.instrument_names == ref.instrument_names);
  }
  CHECK(ref.size() == 2);
}

TEST_CASE("every message is a single line") {
  Scratch s("one_line");
  for (const std::string& content : {std::string(""), std::string("a,b\n"), std::string("1,2,3\n1 2 3\n"),
                                     std::string("1,2\n"), std::string("1,x,3\n")}) {
    const std::string m = s.velocity_error(content);
    CHECK(m != "no error");
    CHECK(m.find('\n') == std::string::npos);
  }
}

}  // TEST_SUITE
