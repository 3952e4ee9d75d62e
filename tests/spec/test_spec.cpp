// Unit tests for the spec reader: both plant forms, defaults, normalization, and the exact
// shape (file:line:column: key: message) of the errors, including did-you-mean suggestions.
// Every plant here is an invented example (conveyor, heater, pump, fan, valve).
#include <unistd.h>

#include <algorithm>
#include <catch2/catch.hpp>
#include <complex>
#include <filesystem>
#include <fstream>
#include <string>
#include <vector>

#include "specloop/spec/spec.hpp"

using specloop::parse_spec;
using specloop::SpecError;
using specloop::Structure;

namespace {

/// The SpecError message `text` produces, or "no error" when it parses.
std::string error_of(std::string_view text, const std::string& path = "specs/unit.toml") {
  try {
    parse_spec(text, path);
  } catch (const SpecError& error) {
    return error.what();
  }
  return "no error";
}

void check_coefficients(const std::vector<double>& actual, const std::vector<double>& expected) {
  REQUIRE(actual.size() == expected.size());
  for (std::size_t i = 0; i < expected.size(); ++i) {
    CHECK(actual[i] == Approx(expected[i]).margin(1e-12));
  }
}

void check_roots(const std::vector<std::complex<double>>& actual,
                 const std::vector<std::complex<double>>& expected) {
  REQUIRE(actual.size() == expected.size());
  for (std::size_t i = 0; i < expected.size(); ++i) {
    CHECK(actual[i].real() == Approx(expected[i].real()).margin(1e-9));
    CHECK(actual[i].imag() == Approx(expected[i].imag()).margin(1e-9));
  }
}

}  // namespace

TEST_CASE("structure names round-trip and only pi/pid integrate", "[spec]") {
  const std::vector<std::string> expected{"p", "pi", "pd", "pid", "lead", "lag", "lead-lag"};
  CHECK(specloop::structure_names() == expected);
  for (const auto& name : expected) {
    const auto structure = specloop::parse_structure(name);
    REQUIRE(structure.has_value());
    CHECK(specloop::structure_name(*structure) == name);
  }
  CHECK(specloop::parse_structure("lead_lag") == std::nullopt);
  CHECK(specloop::parse_structure("PID") == std::nullopt);
  CHECK(specloop::parse_structure("") == std::nullopt);
  CHECK(specloop::has_integrator(Structure::pi));
  CHECK(specloop::has_integrator(Structure::pid));
  CHECK_FALSE(specloop::has_integrator(Structure::p));
  CHECK_FALSE(specloop::has_integrator(Structure::pd));
  CHECK_FALSE(specloop::has_integrator(Structure::lead));
  CHECK_FALSE(specloop::has_integrator(Structure::lag));
  CHECK_FALSE(specloop::has_integrator(Structure::lead_lag));
}

TEST_CASE("zeros/poles/gain form is expanded to coefficients by hand-checkable products",
          "[spec]") {
  // Conveyor belt speed loop, invented numbers.
  const auto spec = parse_spec(R"(title = "Conveyor belt speed loop"
[plant]
zeros = [-4.0]
poles = [-1, [-2, 3]]
gain  = 20
delay = 0.05
)",
                               "specs/conveyor.toml");
  CHECK(spec.path == "specs/conveyor.toml");
  CHECK(spec.name == "conveyor");
  CHECK(spec.title == "Conveyor belt speed loop");
  CHECK(spec.plant.given_as_zeros_poles);
  // (s + 1)(s² + 4s + 13) = s³ + 5s² + 17s + 13
  check_coefficients(spec.plant.denominator, {1.0, 5.0, 17.0, 13.0});
  // 20 (s + 4)
  check_coefficients(spec.plant.numerator, {20.0, 80.0});
  check_roots(spec.plant.poles, {{-1.0, 0.0}, {-2.0, 3.0}, {-2.0, -3.0}});
  check_roots(spec.plant.zeros, {{-4.0, 0.0}});
  CHECK(spec.plant.gain == 20.0);
  CHECK(spec.plant.delay_s == 0.05);
}

TEST_CASE("two pairs and a pole at the origin expand correctly", "[spec]") {
  // Fan with a flexible mount: s (s² + 2s + 5)(s² + 1) = s⁵ + 2s⁴ + 6s³ + 2s² + 5s
  const auto spec = parse_spec(R"([plant]
poles = [0, [-1, 2], [0, 1]]
zeros = [[-0.5, 0.5]]
gain = -2.5
)",
                               "fan.toml");
  check_coefficients(spec.plant.denominator, {1.0, 2.0, 6.0, 2.0, 5.0, 0.0});
  // -2.5 (s² + s + 0.5)
  check_coefficients(spec.plant.numerator, {-2.5, -2.5, -1.25});
  CHECK(spec.plant.denominator.back() == 0.0);  // exactly zero, not merely small
  CHECK(spec.plant.poles.size() == 5);
  CHECK(spec.plant.zeros.size() == 2);
}

TEST_CASE("numerator/denominator form gets zeros, poles and gain from the coefficients", "[spec]") {
  // Heater zone: 6 (s + 2) / (2 s (s² + 6s + 25)) -> poles 0, -3 ± 4j; zero -2; gain 3.
  const auto spec = parse_spec(R"([plant]
numerator = [6, 12]
denominator = [2.0, 12.0, 50.0, 0.0]
)",
                               "/tmp/some dir/heater.toml");
  CHECK(spec.name == "heater");
  CHECK_FALSE(spec.plant.given_as_zeros_poles);
  check_coefficients(spec.plant.numerator, {6.0, 12.0});
  check_coefficients(spec.plant.denominator, {2.0, 12.0, 50.0, 0.0});
  CHECK(spec.plant.gain == 3.0);
  // Sorted by real part descending, each pair as (+im, -im); the origin pole is exact.
  check_roots(spec.plant.poles, {{0.0, 0.0}, {-3.0, 4.0}, {-3.0, -4.0}});
  CHECK(spec.plant.poles[0] == std::complex<double>(0.0, 0.0));
  CHECK(spec.plant.poles[1] == std::conj(spec.plant.poles[2]));
  check_roots(spec.plant.zeros, {{-2.0, 0.0}});
}

TEST_CASE("a constant numerator has no zeros", "[spec]") {
  const auto spec = parse_spec("[plant]\nnumerator = [4]\ndenominator = [1, 0.5]\n", "pump.toml");
  CHECK(spec.plant.zeros.empty());
  check_roots(spec.plant.poles, {{-0.5, 0.0}});
  CHECK(spec.plant.gain == 4.0);
}

TEST_CASE("defaults apply when optional sections and keys are left out", "[spec]") {
  const auto spec = parse_spec("[plant]\npoles = [-2.0]\n", "specs/valve.toml");
  CHECK(spec.title.empty());
  CHECK(spec.plant.gain == 1.0);
  check_coefficients(spec.plant.numerator, {1.0});
  check_coefficients(spec.plant.denominator, {1.0, 2.0});
  CHECK(spec.plant.delay_s == 0.0);
  CHECK(spec.plant.zeros.empty());
  CHECK_FALSE(spec.actuator.limited);
  CHECK(spec.actuator.min == -1e300);
  CHECK(spec.actuator.max == 1e300);
  CHECK(spec.controller.structure == Structure::pid);
  CHECK(spec.controller.derivative_filter == 10.0);
  CHECK_FALSE(spec.requirements.overshoot_max_pct);
  CHECK_FALSE(spec.requirements.peak_time_ratio);
  CHECK_FALSE(spec.requirements.peak_time_max_s);
  CHECK_FALSE(spec.requirements.settling_time_max_s);
  CHECK_FALSE(spec.requirements.rise_time_max_s);
  CHECK_FALSE(spec.requirements.steady_state_error_max);
  CHECK_FALSE(spec.requirements.effort_max);
  CHECK(spec.requirements.settling_band_pct == 2.0);
  CHECK(spec.reference.amplitude == 1.0);
}

TEST_CASE("every section and key is read into its field", "[spec]") {
  const auto spec = parse_spec(R"(title = "Pump pressure loop"
[plant]
poles = [-0.8, -12]
gain = 3
[actuator]
min = 0
max = 10.5
[controller]
structure = "lead-lag"
derivative_filter = 8
[requirements]
overshoot_max_pct = 12.5
peak_time_ratio = 0.6
settling_time_max = 2.5
peak_time_max = 1.0
rise_time_max = 0.5
settling_band_pct = 5
steady_state_error_max = 0.02
effort_max = 9
[reference]
amplitude = -3.5
)",
                               "pump.toml");
  CHECK(spec.actuator.limited);
  CHECK(spec.actuator.min == 0.0);
  CHECK(spec.actuator.max == 10.5);
  CHECK(spec.controller.structure == Structure::lead_lag);
  CHECK(spec.controller.derivative_filter == 8.0);
  CHECK(spec.requirements.overshoot_max_pct == 12.5);
  CHECK(spec.requirements.peak_time_ratio == 0.6);
  CHECK(spec.requirements.settling_time_max_s == 2.5);
  CHECK(spec.requirements.peak_time_max_s == 1.0);
  CHECK(spec.requirements.rise_time_max_s == 0.5);
  CHECK(spec.requirements.settling_band_pct == 5.0);
  CHECK(spec.requirements.steady_state_error_max == 0.02);
  CHECK(spec.requirements.effort_max == 9.0);
  CHECK(spec.reference.amplitude == -3.5);
}

TEST_CASE("inline tables are sections too", "[spec]") {
  const auto spec = parse_spec(
      "plant = { poles = [-1.0, -3.0], gain = 3 }\ncontroller = { structure = \"pi\" }\n",
      "blower.toml");
  check_coefficients(spec.plant.denominator, {1.0, 4.0, 3.0});
  CHECK(spec.controller.structure == Structure::pi);
}

TEST_CASE("zero steady-state error is accepted when the loop has an integrator", "[spec]") {
  // From the controller.
  CHECK_NOTHROW(parse_spec(R"([plant]
poles = [-1.0]
[controller]
structure = "pi"
[requirements]
steady_state_error_max = 0
)",
                           "a.toml"));
  // From the plant, in either form.
  CHECK_NOTHROW(parse_spec(R"([plant]
poles = [0.0, -4.0]
[controller]
structure = "lead"
[requirements]
steady_state_error_max = 0
)",
                           "b.toml"));
  CHECK_NOTHROW(parse_spec(R"([plant]
numerator = [1.0]
denominator = [1.0, 4.0, 0.0]
[controller]
structure = "p"
[requirements]
steady_state_error_max = 0.0
)",
                           "c.toml"));
  // A nonzero tolerance never needs an integrator.
  CHECK_NOTHROW(parse_spec(R"([plant]
poles = [-1.0]
[controller]
structure = "p"
[requirements]
steady_state_error_max = 0.05
)",
                           "d.toml"));
}

TEST_CASE("error messages read file:line:column: key: expected ..., got ...", "[spec][errors]") {
  CHECK(error_of(R"([plant]
poles = [-1.0, -5.0]
[requirements]
settling_time_max = 2.0

overshoot_max_pct = -5
)") == "specs/unit.toml:6:1: requirements.overshoot_max_pct: expected a number in (0, 100), "
       "got -5");

  CHECK(error_of("[plant]\n  poles = [-1.0]\n  gain = \"high\"\n") ==
        "specs/unit.toml:3:3: plant.gain: expected a number, got a string (\"high\")");

  CHECK(error_of("[plant]\npoles = [-1.0]\ngain = true\n") ==
        "specs/unit.toml:3:1: plant.gain: expected a number, got a boolean (true)");

  CHECK(error_of("[plant]\npoles = [-1.0]\ndelay = -inf\n") ==
        "specs/unit.toml:3:1: plant.delay: expected a finite number, got -inf");

  CHECK(error_of("[plant]\npoles = [-1.0, nan]\n") ==
        "specs/unit.toml:2:16: plant.poles[1]: expected a finite number, got nan");

  CHECK(error_of("[plant]\npoles = [-1.0, [-2.0, -0.5]]\n") ==
        "specs/unit.toml:2:16: plant.poles[1]: expected a pair [re, im] with im > 0 (it stands "
        "for re ± j·im), got [-2, -0.5]");

  CHECK(error_of("[plant]\npoles = [-1.0]\n[reference]\namplitude = 0.0\n") ==
        "specs/unit.toml:4:1: reference.amplitude: expected a nonzero number of magnitude in [1e-6, 1e6] (express "
        "the output in other units otherwise), got 0");

  CHECK(error_of("[plant]\npoles = [-1.0]\n[requirements]\npeak_time_ratio = 10.5\n") ==
        "specs/unit.toml:4:1: requirements.peak_time_ratio: expected a number in (0, 10], got "
        "10.5");
}

TEST_CASE("range limits are exclusive or inclusive exactly as documented", "[spec][errors]") {
  const auto requirement = [](const std::string& line) {
    return "[plant]\npoles = [-1.0]\n[requirements]\n" + line + "\n";
  };
  CHECK_NOTHROW(parse_spec(requirement("peak_time_ratio = 10"), "x.toml"));
  CHECK_NOTHROW(parse_spec(requirement("steady_state_error_max = 0.0\n[controller]\n"
                                       "structure = \"pid\""),
                           "x.toml"));
  CHECK_NOTHROW(parse_spec(requirement("overshoot_max_pct = 99.9"), "x.toml"));
  CHECK_THROWS_AS(parse_spec(requirement("overshoot_max_pct = 0"), "x.toml"), SpecError);
  CHECK_THROWS_AS(parse_spec(requirement("settling_band_pct = 50"), "x.toml"), SpecError);
  CHECK_THROWS_AS(parse_spec(requirement("settling_band_pct = 0"), "x.toml"), SpecError);
  CHECK_THROWS_AS(parse_spec(requirement("peak_time_ratio = 0"), "x.toml"), SpecError);
  CHECK_THROWS_AS(parse_spec(requirement("effort_max = -1"), "x.toml"), SpecError);
  CHECK_NOTHROW(parse_spec("[plant]\npoles = [-1.0]\ndelay = 0\n", "x.toml"));
}

TEST_CASE("unknown names get a did-you-mean or the list of valid names", "[spec][errors]") {
  CHECK(error_of("[plant]\npols = [-1.0]\n") ==
        "specs/unit.toml:2:1: plant.pols: unknown key; did you mean 'poles'?");
  CHECK(error_of("[plant]\nPoles = [-1.0]\n") ==
        "specs/unit.toml:2:1: plant.Poles: unknown key; did you mean 'poles'?");
  CHECK(error_of("[plant]\npoles = [-1.0]\n[actuator]\nmin = 0\nmax = 1\nbias = 5\n") ==
        "specs/unit.toml:6:1: actuator.bias: unknown key; valid keys in [actuator]: min, max, rate_max");
  CHECK(error_of("[plant]\npoles = [-1.0]\n\n[controler]\nstructure = \"pi\"\n") ==
        "specs/unit.toml:4:1: controler: unknown section; did you mean 'controller'?");
  CHECK(error_of("[plant]\npoles = [-1.0]\n[logging]\nlevel = 3\n") ==
        "specs/unit.toml:3:1: logging: unknown section; valid top-level names: title, plant, "
        "actuator, controller, requirements, reference, search, disturbance, sweep, uncertainty, rules, units");
  CHECK(error_of("titel = \"Valve\"\n[plant]\npoles = [-1.0]\n") ==
        "specs/unit.toml:1:1: titel: unknown key; did you mean 'title'?");
  CHECK(error_of("[plant]\npoles = [-1.0]\n[controller]\nstructure = \"Lead\"\n") ==
        "specs/unit.toml:4:1: controller.structure: unknown structure \"Lead\" (did you mean "
        "'lead'?); valid structures: p, pi, pd, pid, lead, lag, lead-lag");
  CHECK(error_of("[plant]\npoles = [-1.0]\n[controller]\nstructure = \"fuzzy\"\n") ==
        "specs/unit.toml:4:1: controller.structure: unknown structure \"fuzzy\"; valid "
        "structures: p, pi, pd, pid, lead, lag, lead-lag");
}

TEST_CASE("the first problem in file order is the one reported", "[spec][errors]") {
  // toml++ iterates keys alphabetically; the reader must still report the earlier line.
  CHECK(error_of("[plant]\nzzz = 1\naaa = 2\npoles = [-1.0]\n") ==
        "specs/unit.toml:2:1: plant.zzz: unknown key; valid keys in [plant]: zeros, poles, "
        "gain, numerator, denominator, delay, nonlinear");
}

TEST_CASE("plant form errors name the offending key", "[spec][errors]") {
  CHECK(error_of("title = \"Fan\"\n") ==
        "specs/unit.toml:1:1: plant: missing section; a spec needs [plant] with poles (and "
        "optional zeros, gain) or with numerator and denominator");
  CHECK(error_of("title = \"Fan\"\n\n[plant]\ndelay = 1.0\n") ==
        "specs/unit.toml:3:1: plant.poles: missing; give poles (with optional zeros and gain), "
        "numerator and denominator, or a [plant.nonlinear] section");
  CHECK(error_of("[plant]\ndenominator = [1.0, 2.0]\npoles = [-2.0]\n") ==
        "specs/unit.toml:3:1: plant.poles: cannot be combined with plant.denominator; give "
        "either zeros/poles/gain or numerator/denominator, not both");
  CHECK(error_of("[plant]\nnumerator = [1.0, 2.0, 3.0]\ndenominator = [1.0, 2.0]\n") ==
        "specs/unit.toml:2:1: plant.numerator: improper plant: numerator degree 2 exceeds "
        "denominator degree 1");
  CHECK(error_of("[plant]\nzeros = [-1.0, -2.0]\npoles = [-3.0]\n") ==
        "specs/unit.toml:2:1: plant.zeros: improper plant: numerator degree 2 (2 zeros) exceeds "
        "denominator degree 1 (1 poles); a plant needs more poles than zeros");
  CHECK(error_of("[plant]\nnumerator = [1.0]\ndenominator = [0.0, 1.0, 2.0]\n") ==
        "specs/unit.toml:3:1: plant.denominator: leading coefficient must be nonzero; remove the "
        "leading zeros");
  CHECK(error_of("[plant]\nnumerator = [0, 0]\ndenominator = [1.0, 2.0]\n") ==
        "specs/unit.toml:2:1: plant.numerator: all coefficients are zero; the plant output would "
        "always be zero");
  CHECK(error_of("[plant]\npoles = []\n") ==
        "specs/unit.toml:2:1: plant.poles: expected at least one pole, got an empty array");
  CHECK(error_of("[plant]\npoles = [-1.0, [-1.0, 2.0, 3.0]]\n") ==
        "specs/unit.toml:2:16: plant.poles[1]: expected a pair [re, im] of exactly 2 numbers, got "
        "an array of 3 elements");
  CHECK(error_of("[plant]\npoles = [-1.0]\ngain = 0.0\n") ==
        "specs/unit.toml:3:1: plant.gain: expected a nonzero number, got 0");
  // Equal degrees (biproper: a direct feedthrough) are refused, in both forms, with the rule.
  CHECK_THAT(error_of("[plant]\nzeros = [-1.0]\npoles = [-3.0]\n"),
             Catch::Matchers::StartsWith("specs/unit.toml:2:1: plant.zeros: as many zeros as poles: a biproper plant") &&
                 Catch::Matchers::Contains("degree(numerator) < degree(denominator)"));
  CHECK_THAT(error_of("[plant]\nnumerator = [2.0, 1.0]\ndenominator = [1.0, 3.0]\n"),
             Catch::Matchers::StartsWith("specs/unit.toml:2:1: plant.numerator: numerator degree 1 equals denominator "
                                         "degree 1: a biproper plant"));
  CHECK_NOTHROW(parse_spec("[plant]\nnumerator = [2.0, 1.0]\ndenominator = [1.0, 3.0, 2.0]\n", "x.toml"));
}

TEST_CASE("section-level errors point at the section header", "[spec][errors]") {
  CHECK(error_of("[plant]\npoles = [-1.0]\n\n[actuator]\n\n[reference]\namplitude = 2\n") ==
        "specs/unit.toml:4:1: actuator: empty section");
  CHECK(error_of("[plant]\npoles = [-1.0]\n[actuator]\nmax = 5.0\n") ==
        "specs/unit.toml:3:1: actuator.min: missing; give both min and max, or neither");
  CHECK(error_of("[plant]\npoles = [-1.0]\n[actuator]\nmin = 5.0\nmax = 5.0\n") ==
        "specs/unit.toml:5:1: actuator.max: expected a number greater than actuator.min (5), got "
        "5");
  CHECK(error_of("controller = \"pid\"\n[plant]\npoles = [-1.0]\n") ==
        "specs/unit.toml:1:1: controller: expected a table (a [controller] section), got a "
        "string (\"pid\")");
}

TEST_CASE("zero steady-state error without any integrator is a contradiction", "[spec][errors]") {
  const std::string message = error_of(R"([plant]
poles = [-0.5, -4.0]
[controller]
structure = "lead"
[requirements]
overshoot_max_pct = 10
steady_state_error_max = 0
)");
  CHECK_THAT(message, Catch::Matchers::StartsWith(
                          "specs/unit.toml:7:1: requirements.steady_state_error_max: zero "
                          "steady-state error to a step needs an integrator in the loop"));
  CHECK_THAT(message, Catch::Matchers::Contains("'lead'"));
  CHECK_THAT(message, Catch::Matchers::Contains("\"pi\" or \"pid\""));
  // A zero at the origin cancelling the plant's integrator is refused before that (a hidden mode
  // on the imaginary axis).
  CHECK_THAT(
      error_of(R"([plant]
numerator = [1.0, 0.0]
denominator = [1.0, 3.0, 0.0]
[controller]
structure = "pd"
[requirements]
steady_state_error_max = 0
)"),
      Catch::Matchers::StartsWith("specs/unit.toml:2:1: plant.numerator: zero 0 cancels the pole 0 (plant.denominator) "
                                  "on the imaginary axis"));
}

TEST_CASE("TOML syntax errors and duplicates keep their line and column", "[spec][errors]") {
  CHECK_THAT(error_of("[plant]\npoles = [-1.0]\ngain = 2.0\ngain = 3.0\n"),
             Catch::Matchers::StartsWith("specs/unit.toml:4:") &&
                 Catch::Matchers::Contains("invalid TOML") && Catch::Matchers::Contains("'gain'"));
  CHECK_THAT(error_of("[plant]\npoles = [-1.0]\n[plant]\ngain = 3.0\n"),
             Catch::Matchers::StartsWith("specs/unit.toml:3:1: invalid TOML") &&
                 Catch::Matchers::Contains("'plant'"));
  CHECK_THAT(error_of("title = \"Pump\"\n[plant\npoles = [-1.0]\n"),
             Catch::Matchers::StartsWith("specs/unit.toml:2:") &&
                 Catch::Matchers::Contains("invalid TOML"));
}

TEST_CASE("load_spec reads files and reports unreadable ones", "[spec]") {
  const auto folder =
      std::filesystem::temp_directory_path() / ("specloop_test_spec_" + std::to_string(::getpid()));
  std::filesystem::create_directories(folder);
  const auto file = folder / "heater.toml";
  {
    std::ofstream out(file);
    out << "title = \"Oven zone 2\"\n[plant]\npoles = [-0.05]\ngain = 0.8\n[requirements]\n"
           "overshoot_max_pct = 0\n";
  }
  CHECK(std::string([&] {
          try {
            specloop::load_spec(file.string());
          } catch (const SpecError& error) {
            return std::string(error.what());
          }
          return std::string("no error");
        }()) == file.string() +
                    ":6:1: requirements.overshoot_max_pct: expected a number in "
                    "(0, 100), got 0");
  {
    std::ofstream out(file);
    out << "title = \"Oven zone 2\"\n[plant]\npoles = [-0.05]\ngain = 0.8\n";
  }
  const auto spec = specloop::load_spec(file.string());
  CHECK(spec.name == "heater");
  CHECK(spec.title == "Oven zone 2");
  CHECK(spec.path == file.string());

  const std::string missing = (folder / "absent.toml").string();
  CHECK_THROWS_WITH(specloop::load_spec(missing),
                    missing + ": cannot read file: No such file or directory");
  CHECK_THROWS_WITH(specloop::load_spec(folder.string()),
                    folder.string() + ": cannot read file: Is a directory");
  std::filesystem::remove_all(folder);
}

TEST_CASE("every bad spec in the corpus fails with its expected key and line", "[spec][corpus]") {
  const std::filesystem::path corpus =
      std::filesystem::path(SPECLOOP_SOURCE_DIR) / "tests" / "bad_specs";
  REQUIRE(std::filesystem::is_directory(corpus));
  std::vector<std::filesystem::path> files;
  for (const auto& entry : std::filesystem::directory_iterator(corpus)) {
    if (entry.path().extension() == ".toml") files.push_back(entry.path());
  }
  std::sort(files.begin(), files.end());
  CHECK(files.size() >= 28);
  for (const auto& file : files) {
    INFO(file.string());
    std::ifstream in(file);
    std::string expect_line;
    std::string line_line;
    std::getline(in, expect_line);
    std::getline(in, line_line);
    REQUIRE(expect_line.rfind("# expect: ", 0) == 0);
    REQUIRE(line_line.rfind("# line: ", 0) == 0);
    const std::string expected = expect_line.substr(10);
    const std::string line = line_line.substr(8);
    std::string message = "no error";
    try {
      specloop::load_spec(file.string());
    } catch (const SpecError& error) {
      message = error.what();
    }
    CHECK_THAT(message, Catch::Matchers::Contains(expected));
    if (line == "any") {
      CHECK_THAT(message, Catch::Matchers::StartsWith(file.string() + ":"));
    } else {
      CHECK_THAT(message, Catch::Matchers::StartsWith(file.string() + ":" + line + ":"));
    }
  }
}
