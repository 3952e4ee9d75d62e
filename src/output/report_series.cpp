// The design report's CSV series (report_parts.hpp): the step traces (cut at the figure's time
// axis, at most ~2000 rows), the root locus, the s-plane's marked points and the frequency
// responses.
#include <algorithm>
#include <cmath>
#include <fmt/format.h>

#include "output/report_parts.hpp"

namespace specloop::design_report {

using namespace page;

namespace {

// Every stride-th value, and the last one.
std::vector<double> subsample(const std::vector<double>& v, std::size_t stride) {
  std::vector<double> out;
  for (std::size_t i = 0; i < v.size(); i += stride) out.push_back(v[i]);
  if (!v.empty() && (v.size() - 1) % stride != 0) out.push_back(v.back());
  return out;
}

// One CSV per trace: a plotted trace ends where the figure's time axis does.
void write_traces(const ReportData& data, const fs::path& dir) {
  for (const ResponseTrace& t : data.traces.responses) {
    // A plotted trace ends where the figure's time axis does (the axis covers its settling).
    std::size_t rows = t.time_s.size();
    if (plotted(t))
      rows = static_cast<std::size_t>(std::upper_bound(t.time_s.begin(), t.time_s.end(), data.plot_horizon_s) - t.time_s.begin());
    auto first = [&](const std::vector<double>& v) { return std::vector<double>(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(std::min(rows, v.size()))); };
    // Keep reports small: at most ~2000 rows per trace (every sample of the usual grids).
    const std::size_t stride = std::max<std::size_t>(1, rows / 2000);
    const auto time = subsample(first(t.time_s), stride), y = subsample(first(t.output), stride),
               u = subsample(first(t.control), stride);
    if (t.nonlinear) {
      const auto uc = subsample(first(t.command), stride);
      write_csv(dir / trace_file(t), {"time_s", "output", "control_applied", "control_command"}, {&time, &y, &u, &uc});
    } else {
      write_csv(dir / trace_file(t), {"time_s", "output", "control"}, {&time, &y, &u});
    }
  }
}

// locus.csv: the finite points of every branch.
void write_locus(const RootLocus& locus, const fs::path& dir) {
  std::vector<double> gain, branch, re, im;
  for (std::size_t b = 0; !locus.poles.empty() && b < locus.poles.front().size(); ++b)
    for (std::size_t i = 0; i < locus.gains.size(); ++i) {
      const Complex p = locus.poles[i][b];
      if (!std::isfinite(locus.gains[i]) || !std::isfinite(p.real()) || !std::isfinite(p.imag())) continue;
      gain.push_back(locus.gains[i]);
      branch.push_back(static_cast<double>(b));
      re.push_back(locus.poles[i][b].real());
      im.push_back(locus.poles[i][b].imag());
    }
  write_csv(dir / "locus.csv", {"gain_multiplier", "branch", "real_per_s", "imag_rad_per_s"}, {&gain, &branch, &re, &im});
}

}  // namespace

SplaneView write_series(const DesignRun& run, const ReportData& data, const fs::path& dir) {
  fs::create_directories(dir);
  write_traces(data, dir);
  write_locus(data.traces.locus.locus, dir);
  if (!data.traces.scenarios.empty()) {
    // Every scenario's response in one file, a blank line between scenarios (one curve each).
    std::string envelope = "scenario,time,output,control\n";
    for (const auto& [index, t] : data.traces.scenarios) {
      for (std::size_t k = 0; k < t.time_s.size(); ++k)
        envelope += fmt::format("{},{},{},{}\n", index, csv_number(t.time_s[k]), csv_number(t.output[k]), csv_number(t.control[k]));
      envelope += "\n";
    }
    write_text(dir / "envelope.csv", envelope);
  }
  // Marked points of the s-plane, and the view that holds them.
  double extent_re = 0.0, extent_im = 0.0, rightmost = 0.0;
  std::string points = "kind,design,real_per_s,imag_rad_per_s\n";
  auto point = [&](const std::string& kind, const std::string& design, Complex z) {
    if (!std::isfinite(z.real()) || !std::isfinite(z.imag())) return;  // drawn without it
    points += fmt::format("{},{},{},{}\n", kind, design, csv_number(z.real()), csv_number(z.imag()));
    extent_re = std::max(extent_re, std::abs(z.real()));
    extent_im = std::max(extent_im, std::abs(z.imag()));
    rightmost = std::max(rightmost, z.real());
  };
  // The open-loop roots of the locus's loop (the delay's Padé roots marked apart), or the plant's.
  const LocusTrace& locus = data.traces.locus;
  const std::string roots_of = locus.of_plant ? std::string("plant") : name_of(*locus.design);
  for (const LoopRoot& p : locus.poles) point(p.delay_approximant ? "delay_approximant_pole" : "open_loop_pole", roots_of, p.at);
  for (const LoopRoot& z : locus.zeros) point(z.delay_approximant ? "delay_approximant_zero" : "open_loop_zero", roots_of, z.at);
  for (const Design& d : run.designs)
    if (d.status == StepStatus::ok && on_splane(d.role))
      for (const Complex& p : d.closed_loop_poles) point("closed_loop_pole", name_of(d.role), p);
  if (const Design* best = recommended_design(run)) {
    const std::string name = name_of(best->role);
    if (best->second_order) {
      const double wn = best->second_order->natural_frequency, z = best->second_order->damping_ratio;
      const Complex pair(-z * wn, wn * std::sqrt(std::max(0.0, 1.0 - z * z)));
      point("dominant_pair", name, pair);
      point("dominant_pair", name, std::conj(pair));
    }
    if (best->dominance) {
      for (const Complex& p : best->dominance->slow_poles) {
        point("breaks_approximation", name, p);
        if (p.imag() != 0.0) point("breaks_approximation", name, std::conj(p));
      }
      for (const Complex& z : best->dominance->near_zeros) {
        point("breaks_approximation", name, z);
        if (z.imag() != 0.0) point("breaks_approximation", name, std::conj(z));
      }
    }
  }
  // The ζ-line of the overshoot limit, far enough to cross the whole view (not part of the view).
  if (const double zeta = run.characterization.damping_ratio; zeta > 0.0 && zeta < 1.0) {
    const double far = 6.0 * std::max(extent_re, extent_im) + 1.0;
    for (const char* kind : {"damping_line_upper", "damping_line_lower"}) {
      const double sign = std::string_view(kind).ends_with("upper") ? 1.0 : -1.0;
      points += fmt::format("{0},,0,0\n{0},,{1},{2}\n", kind, csv_number(-far * zeta), csv_number(sign * far * std::sqrt(1.0 - zeta * zeta)));
    }
  }
  write_text(dir / "splane_points.csv", points);
  for (const auto& [role, f] : data.traces.frequency)
    write_csv(dir / fmt::format("frequency_{}.csv", role_name(role)), {"omega_rad_per_s", "magnitude_db", "phase_deg"},
              {&f.omega_rad_s, &f.magnitude_db, &f.phase_deg});
  SplaneView view;
  view.left = extent_re > 0.0 ? std::max(extent_re * 1.3, 1e-6) : 1.0;  // every point at the origin: a unit view
  view.right = std::max(0.25 * view.left, 1.3 * rightmost);  // right-half-plane zeros (a delay's Padé zeros) in view
  view.im = std::max(extent_im * 1.3, 0.6 * view.left);
  return view;
}

}  // namespace specloop::design_report
