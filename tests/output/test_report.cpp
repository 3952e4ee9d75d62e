// The report's computed figures (root locus, loop frequency response) against closed forms, and
// the report writer's file handling. Loops are invented; formulas are cited beside each check.
#include <catch2/catch.hpp>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <numbers>
#include <sstream>
#include <unistd.h>

#include <fmt/format.h>

#include "specloop/output/report.hpp"

using namespace specloop;
using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;

namespace fs = std::filesystem;

TEST_CASE("root locus of k/(s(s + 2)) follows the closed form", "[locus]") {
  // Characteristic equation s² + 2s + k = 0: s = −1 ± √(1 − k); for k > 1 the branches run on
  // Re s = −1 (root-locus rules, any introductory control text; the quadratic formula).
  const TransferFunction loop(Polynomial({1.0}), Polynomial({1.0, 2.0, 0.0}));
  const RootLocus locus = trace_root_locus(loop, 1e-3, 1e3);
  REQUIRE(locus.gains.size() == locus.poles.size());
  REQUIRE(std::find(locus.gains.begin(), locus.gains.end(), 1.0) != locus.gains.end());
  CHECK(std::is_sorted(locus.gains.begin(), locus.gains.end()));
  double worst = 0.0;
  for (std::size_t i = 0; i < locus.gains.size(); ++i) {
    const double k = locus.gains[i];
    const Complex root = std::sqrt(Complex(1.0 - k, 0.0));
    for (const Complex& p : locus.poles[i])
      worst = std::max(worst, std::min(std::abs(p - (-1.0 + root)), std::abs(p - (-1.0 - root))));
  }
  CHECK(worst < 1e-6);
  // Branches are continuous: no pole jumps farther than the refinement allows (2 % of the
  // scale, the scale here being |poles at k = 1000| ≈ 31.6) except across the breakaway at
  // k = 1, where the double root splits with infinite speed (√(k − 1)).
  for (std::size_t i = 1; i < locus.gains.size(); ++i)
    for (std::size_t b = 0; b < 2; ++b) {
      const double move = std::abs(locus.poles[i][b] - locus.poles[i - 1][b]);
      if (locus.gains[i - 1] < 0.9 || locus.gains[i] > 1.1) CHECK(move <= 0.02 * std::sqrt(1000.0) + 1e-9);
    }
  CHECK_THROWS_WITH(trace_root_locus(loop, 2.0, 10.0), Contains("k_min"));
}

TEST_CASE("loop frequency response of 1/(s(s + 1)) follows the closed form", "[locus]") {
  // |L(jω)| = 1/(ω√(1 + ω²)), ∠L = −90° − arctan ω (standard first-order and integrator terms).
  const TransferFunction loop(Polynomial({1.0}), Polynomial({1.0, 1.0, 0.0}));
  const FrequencySeries f = loop_frequency_response(loop, 1e-3, 1e3, 300);
  REQUIRE(f.omega_rad_s.size() == 300);
  for (std::size_t i = 0; i < f.omega_rad_s.size(); ++i) {
    const double w = f.omega_rad_s[i];
    CHECK_THAT(f.magnitude_db[i], WithinAbs(-20.0 * std::log10(w * std::sqrt(1.0 + w * w)), 1e-9));
    CHECK_THAT(f.phase_deg[i], WithinAbs(-90.0 - std::atan(w) * 180.0 / std::numbers::pi, 1e-9));
  }
  // Unwrapped: a third-order lag runs continuously past −180° to −270°.
  const TransferFunction lag3(Polynomial({1.0}), Polynomial({1.0, 3.0, 3.0, 1.0}));
  const FrequencySeries g = loop_frequency_response(lag3, 1e-2, 1e3, 400);
  CHECK_THAT(g.phase_deg.back(), WithinAbs(-270.0, 0.5));
  for (std::size_t i = 1; i < g.phase_deg.size(); ++i) CHECK(g.phase_deg[i] <= g.phase_deg[i - 1] + 1e-9);
}

TEST_CASE("the report is written whole, with its tables, also without figures", "[report]") {
  const Spec spec = parse_spec(
      "title = \"Test winch\"\n[plant]\npoles = [-0.8, -5.0]\ngain = 6.0\n[actuator]\nmin = -2.0\nmax = 2.0\n"
      "[controller]\nstructure = \"pi\"\n[requirements]\novershoot_max_pct = 10.0\nsettling_time_max = 8.0\n"
      "[search]\nmax_evaluations = 600\n",
      "<test>");
  const DesignRun run = run_design(spec);
  const fs::path dir = fs::temp_directory_path() / fmt::format("specloop-report-test-{}", ::getpid());
  fs::remove_all(dir);
  ReportOptions options;
  options.render_figures = false;
  const ReportOutcome outcome = write_design_outputs(run, dir / "out", options);
  CHECK_FALSE(outcome.figures_rendered);
  CHECK_THAT(outcome.figures_note, Contains("gnuplot"));
  for (const char* f : {"result.json", "report.html", "report.md", "series/locus.csv", "series/step_optimized.csv",
                        "series/step_optimized_nonlinear.csv", "plots/step.gp", "plots/splane.gp"})
    CHECK(fs::exists(dir / "out" / f));
  CHECK_FALSE(fs::exists(dir / "out" / "plots" / "step.svg"));
  std::ifstream in(dir / "out" / "report.html");
  std::stringstream text;
  text << in.rdbuf();
  CHECK_THAT(text.str(), Contains("id=\"requirements\""));
  CHECK_THAT(text.str(), Contains("not a verified machine"));
  CHECK_THAT(text.str(), Contains(outcome.figures_note.substr(0, 20)));
  // Nothing staged is left beside the output folder.
  for (const auto& entry : fs::directory_iterator(dir)) CHECK(entry.path().filename() == "out");
  fs::remove_all(dir);
}
