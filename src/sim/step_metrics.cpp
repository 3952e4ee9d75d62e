// The exact step simulation's metrics (see step_metrics.hpp): one scan of the samples for their
// extremes and bit masks, then each metric from the few samples and intervals that can decide it,
// between samples on the cubic Hermite interpolant of the exact values and slopes, and on the
// exact series where a value between samples decides something.
#include "sim/step_metrics.hpp"

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstdint>
#include <limits>
#include <optional>
#include <utility>

#include "sim/step_interpolants.hpp"

namespace specloop::exact_step {
namespace {

// The measurement of one simulated step: the samples, their bit masks and derived indices, and
// the stages that write the metrics.
class StepMeasure {
 public:
  StepMeasure(const SimulatedStep& step, const SampleExtremes& ex)
      : s_(step), loop_(step.loop), y_(step.y), u_(step.u), n_(step.loop.states()), count_(step.count),
        y_inf_(step.y_inf), inv_(1.0 / step.y_inf),
        y_scale_(std::abs(ex.y_hi) + std::abs(ex.y_lo)), u_scale_(std::abs(ex.u_hi) + std::abs(ex.u_lo)),
        bits_(step.bits, step.count),
        oc_(n_ >= 1 && n_ <= 8 && !step.basis ? output_coordinates(step.outputs) : OutputCoordinates{}),
        sign_(step.y_inf > 0.0 ? 1.0 : -1.0), f_follows_y_(step.y_inf > 0.0) {
    // Extremes of y/y∞ are extremes of y (y∞ > 0) or swapped (y∞ < 0).
    k_max_ = first_equal(0, y_inf_ > 0.0 ? ex.y_hi : ex.y_lo);
    k_min_ = first_equal(0, y_inf_ > 0.0 ? ex.y_lo : ex.y_hi);
    k_effort_ = first_equal(1, std::abs(ex.u_hi) >= std::abs(ex.u_lo) ? ex.u_hi : ex.u_lo);
    if (n_ <= 8)
      for (int j = 0; j < 2; ++j) {
        SlopeRow& r = slope_rows_[j];
        const int row = j == 0 ? 1 : 3, from_y = step.states.from_y;
        r.stored = 0;
        r.from_y = from_y >= 0 ? step.outputs(row, from_y) : 0.0;
        for (int i = 0; i < n_; ++i)
          if (i != from_y) r.entry[r.stored++] = step.outputs(row, i);
      }
  }

  void integrals(StepMetrics& m) const;
  void peak(StepMetrics& m) const;
  void undershoot(StepMetrics& m) const;
  void effort(StepMetrics& m) const;
  void rise_and_band_entry(StepMetrics& m) const;
  void settling(StepMetrics& m) const;

 private:
  // An extremum found: its value, and where: interval (j, j + 1) at fraction s.
  struct Found {
    double v;
    int j;
    double s;
  };
  struct Integrals {
    double iae = 0.0, ise = 0.0, itae = 0.0;
  };

  // The first sample where output row `row` (0: y, 1: u) takes the value v (one of its extremes).
  int first_equal(int row, double v) const {
    int k = 0;
    if (row == 0 || u_) {
      const double* f = row == 0 ? y_ : u_;
      // Four samples a test (branch-free within the four), then the one.
      while (k + 4 <= count_ && !((f[k] == v) | (f[k + 1] == v) | (f[k + 2] == v) | (f[k + 3] == v))) k += 4;
      while (f[k] != v) ++k;
    } else {
      while (value(1, k) != v) ++k;
    }
    return k;
  }
  double t(int k) const { return s_.time(k); }
  // Sample k of output row `row`: y, or u (from y when the recurrence did not write it).
  double value(int row, int k) const { return row == 0 ? y_[k] : u_ ? u_[k] : s_.layout.effort(y_[k]); }
  // Exact slope of output row 1 (y') or 3 (u') at sample k, from the stored state: the row's
  // entries in the store's order (slope_rows_), and the entry of the component y gives.
  double slope(int row, int k) const {
    if (n_ == 0) return 0.0;
    if (n_ > 8) {  // x per sample, every component
      const double* x = s_.states.stored(k);
      double v = s_.out_const(row);
      for (int i = 0; i < n_; ++i) v += s_.outputs(row, i) * x[i];
      return v;
    }
    const SlopeRow& r = slope_rows_[row == 1 ? 0 : 1];
    const double* x = s_.states.stored(k);
    const std::ptrdiff_t step = s_.states.stride();
    double v = s_.out_const(row) + r.from_y * y_[k];
    for (int i = 0; i < r.stored; ++i) v += r.entry[i] * x[i * step];
    return v;
  }
  double dy(int k) const { return slope(1, k); }  // exact y'(t_k)
  double du(int k) const { return slope(3, k); }  // exact u'(t_k)
  // f = y/y∞ − 1 at a sample.
  double fn(int k) const { return y_[k] * inv_ - 1.0; }
  // Between samples, f can pass a sample extremum by about h²|f''|/8, and the three samples
  // around it give h²|f''| as their second difference; an extremum whose samples are farther
  // than half that second difference (four times the excess) from what it must beat cannot
  // beat it, so only the others are refined.
  double reach(int k) const { return 0.5 * std::abs(2.0 * fn(k) - fn(k - 1) - fn(k + 1)); }
  // Calls visit(k) for every sample maximum of f beyond y∞ (`maxima`) or sample minimum short of
  // it, from word w0 of the masks on, in increasing k.
  template <class Visit>
  void for_each_turn(int w0, bool maxima, Visit&& visit) const {
    for (int w = w0; w < bits_.words(); ++w) {
      const std::uint64_t beyond = bits_.beyond(w, f_follows_y_);
      for (std::uint64_t c = bits_.turns(w, f_follows_y_, maxima) & (maxima ? beyond : ~beyond); c; c &= c - 1)
        visit(64 * w + std::countr_zero(c));
    }
  }

  double* state_rate(int k) const;
  template <class Term>
  bool output_derivatives(int k, int row, int max_terms, Term&& term) const;
  std::pair<double, double> square_error_odd_derivatives(int k) const;
  void integrate_segment(int first, int last, double h, Integrals& sum) const;
  Hermite interval(int row, int k) const {
    const int slope_row = row == 0 ? 1 : 3;
    return Hermite{value(row, k), value(row, k + 1), slope(slope_row, k), slope(slope_row, k + 1), t(k + 1) - t(k)};
  }
  bool exact_on(int j, int row, double s_near, double cover, ExactSeries& e) const;
  double time_of(const Found& f) const { return t(f.j) + f.s * (t(f.j + 1) - t(f.j)); }
  Found refine_extremum(int row, int k, double sgn) const;
  Found polish(Found f, int row, double sgn) const;
  Found latest_tied_peak(Found peak, double peak_n) const;
  void next_peak(const Found& peak, double peak_n, StepMetrics& m) const;
  void post_peak_dip(const Found& peak, StepMetrics& m) const;
  double crossing_time(int k_after, double level_n) const;
  double exit_in(int j) const;

  const SimulatedStep& s_;
  const StateSpace& loop_;
  const double* y_;
  const double* u_;
  int n_, count_;
  struct SlopeRow {
    double entry[8];     // the slope row's entries for the stored rows, in their order (≤ 8 states)
    double from_y;       // its entry for the component y gives (0 when every component is stored)
    int stored;
  };
  SlopeRow slope_rows_[2];  // y' and u' (up to 8 states)
  double y_inf_, inv_;
  double y_scale_, u_scale_;  // |extremes| summed: the rounding scale of y and u
  SampleBits bits_;
  OutputCoordinates oc_;  // the stored states' coordinates (up to 8 states)
  double sign_;           // extremes of y/y∞ are extremes of sign·y
  bool f_follows_y_;
  int k_max_ = 0, k_min_ = 0, k_effort_ = 0;  // the samples of the extremes of y/y∞ and of |u|
};

// x'(t_k) = A·x(t_k) + B·r from the state stored at sample k, in scratch_a (scratch_b is used).
double* StepMeasure::state_rate(int k) const {
  const int n = n_;
  double* v = s_.scratch_a;
  double* w = s_.scratch_b;
  double buffer[8];
  const double* z = s_.states.state(k, buffer);
  if (s_.basis) {  // modal: x − x∞ = V·w, and x' = A·(x − x∞) exactly (A·x∞ + B·r = 0)
    for (int i = 0; i < n; ++i) {
      double x = 0.0;
      for (int j = 0; j < n; ++j) x += s_.basis[i][j] * z[j];
      w[i] = x;
    }
    const double* a = loop_.A.data();  // column-major
    for (int r = 0; r < n; ++r) {
      double acc = 0.0;
      for (int col = 0; col < n; ++col) acc += a[col * n + r] * w[col];
      v[r] = acc;
    }
    return v;
  } else {
    for (int i = 0; i < n; ++i) w[i] = z[i];
  }
  if (oc_.active) {  // back from z = T·x (see output_coordinates) to the loop's x
    double zp = w[oc_.p];
    for (int i = 0; i < n; ++i)
      if (i != oc_.p) zp -= s_.outputs(0, i) * w[i];
    w[oc_.p] = zp / s_.outputs(0, oc_.p);
  }
  // Plain loops (a few dozen products; Eigen's dynamic matrix-vector product costs more in its
  // call than in its arithmetic at this size).
  const double* a = loop_.A.data();  // column-major
  for (int r = 0; r < n; ++r) {
    double acc = s_.amplitude * loop_.B(r);
    for (int col = 0; col < n; ++col) acc += a[col * n + r] * w[col];
    v[r] = acc;
  }
  return v;
}

// Calls term(i, c_i) with c_i = C_row·Aⁱ·x'(t_k), the (i + 1)-th derivative of output `row` at
// sample k (the step input is constant), for i = 0, 1, … < max_terms until it returns false;
// true when it did.
template <class Term>
bool StepMeasure::output_derivatives(int k, int row, int max_terms, Term&& term) const {
  const int n = n_;
  double* v = state_rate(k);  // x'(t_k); then Aⁱ·x'(t_k)
  double* w = s_.scratch_b;
  const double* a = loop_.A.data();  // column-major
  for (int i = 0; i < max_terms; ++i) {
    double ci = 0.0;
    for (int col = 0; col < n; ++col) ci += loop_.C(row, col) * v[col];
    if (!term(i, ci)) return true;
    if (i + 1 == max_terms) break;
    for (int r = 0; r < n; ++r) {
      double acc = 0.0;
      for (int col = 0; col < n; ++col) acc += a[col * n + r] * v[col];
      w[r] = acc;
    }
    std::swap(v, w);
  }
  return false;
}

// f = e² = (y − y∞)²: its third and fifth derivatives at sample k (Leibniz), from y', …, y⁽⁵⁾.
std::pair<double, double> StepMeasure::square_error_odd_derivatives(int k) const {
  double d[5] = {0.0, 0.0, 0.0, 0.0, 0.0};
  if (n_ > 0) output_derivatives(k, 0, 5, [&](int i, double ci) {
    d[i] = ci;
    return true;
  });
  const double e = y_[k] - y_inf_;
  const double f3 = 2.0 * e * d[2] + 6.0 * d[0] * d[1];
  const double f5 = 2.0 * e * d[4] + 10.0 * d[0] * d[3] + 20.0 * d[1] * d[2];
  return std::pair{f3, f5};
}

// Integrals of e = y∞ − y over samples first..last of one uniform segment of step h: the
// trapezoid rule with the Hermite end correction h²/12·(f'(a) − f'(b)) (exact for cubics). ISE,
// whose integrand is smooth, also takes the Euler–Maclaurin h⁴ and h⁶ terms,
// +h⁴/720·(f‴(b) − f‴(a)) and −h⁶/30240·(f⁽⁵⁾(b) − f⁽⁵⁾(a)), from exact derivatives at the
// segment's ends (they telescope like the h² term): on this grid (h·|p| ≤ 0.5, the integrand
// ringing at 2|p|) the h² rule alone errs by about (2h|p|)⁴/720 ≈ 1.4e-3 relative, with them by
// about (2h|p|)⁸/1.2e6. Only on a segment whose step resolves every pole (h·|p| ≤ 1): on the
// coarse segment of a stiff loop a decayed fast mode still reaches the end derivatives as
// p⁵·(its tiny amplitude), and with h·|p| far beyond 2π the series diverges there. The
// corrections of neighbouring intervals cancel, so only the ends of each run of constant sign need
// the slope; an interval where e changes sign is split at its linear zero. The plain sums
// vectorize; the few sign-change intervals are patched afterwards.
void StepMeasure::integrate_segment(int first, int last, double h, Integrals& sum) const {
  if (last <= first) return;
  const double c = h * h / 12.0;
  auto e = [&](int k) { return y_inf_ - y_[k]; };
  auto de = [&](int k) { return -dy(k); };
  const auto [sum_e2, sum_abs, sum_tabs] = segment_sums(s_.bits, y_, first, last, y_inf_, t(first), h);
  auto ends = [&](double f_first, double f_last) { return 0.5 * (f_first + f_last); };
  const double e_a = e(first), e_b = e(last);
  sum.ise += h * (sum_e2 - ends(e_a * e_a, e_b * e_b)) + c * (2.0 * e_a * de(first) - 2.0 * e_b * de(last));
  if (h * s_.fastest_pole <= 1.0) {  // the series is asymptotic only where h resolves every mode
    const auto [f3_a, f5_a] = square_error_odd_derivatives(first);
    const auto [f3_b, f5_b] = square_error_odd_derivatives(last);
    const double h4 = h * h * h * h;
    sum.ise += h4 / 720.0 * (f3_b - f3_a) - h4 * h * h / 30240.0 * (f5_b - f5_a);
  }
  sum.iae += h * (sum_abs - ends(std::abs(e_a), std::abs(e_b)));
  sum.itae += h * (sum_tabs - ends(t(first) * std::abs(e_a), t(last) * std::abs(e_b)));
  auto close_run = [&](int a, int b) {  // samples a..b share the sign of e(a)
    if (b <= a) return;
    const double sgn = e(a) >= 0.0 ? 1.0 : -1.0;
    sum.iae += sgn * c * (de(a) - de(b));
    sum.itae += sgn * c * ((e(a) + t(a) * de(a)) - (e(b) + t(b) * de(b)));
  };
  int run = first;
  for (int k1 = bits_.next_sign_change(first + 1); k1 <= last; k1 = bits_.next_sign_change(k1 + 1)) {
    const int k = k1 - 1;  // e changes sign in (t_k, t_k+1)
    const double e0 = e(k), e1 = e(k + 1), split = e0 / (e0 - e1);
    // Replace this interval's trapezoid by the two triangles either side of the zero.
    sum.iae += 0.5 * h * (std::abs(e0) * split + std::abs(e1) * (1.0 - split) - (std::abs(e0) + std::abs(e1)));
    sum.itae += 0.5 * h * (t(k) * std::abs(e0) * split + t(k + 1) * std::abs(e1) * (1.0 - split) -
                           (t(k) * std::abs(e0) + t(k + 1) * std::abs(e1)));
    close_run(run, k);
    run = k + 1;
  }
  close_run(run, last);
}

void StepMeasure::integrals(StepMetrics& m) const {
  Integrals sum;
  const int fine_last = s_.grid.coarse_intervals > 0 ? s_.grid.fine_intervals : count_ - 1;
  integrate_segment(0, fine_last, s_.grid.step_s, sum);
  if (s_.grid.coarse_intervals > 0) integrate_segment(fine_last, count_ - 1, s_.grid.coarse_step_s, sum);
  m.iae = sum.iae;
  m.ise = sum.ise;
  m.itae = sum.itae;
}

// The exact series of output row `row` (0: y, 1: u) on interval (j, j + 1) (ExactSeries),
// expanded about the interval's end nearer to `s_near` from the state stored there, with terms
// until they vanish at a distance `cover` (in intervals) from it; false when it does not
// converge (then the Hermite value stands).
bool StepMeasure::exact_on(int j, int row, double s_near, double cover, ExactSeries& e) const {
  if (n_ == 0) return false;
  const int kb = s_near <= 0.5 ? j : j + 1;
  const double h = t(j + 1) - t(j);
  e.base = kb - j;
  e.fb = value(row, kb);
  const double scale = row == 0 ? y_scale_ : u_scale_;
  double power = h, reach_power = cover;  // h^{i+1}/(i+1)!, cover^{i+1}
  int negligible = 0;
  return output_derivatives(kb, row, ExactSeries::kMaxTerms, [&](int i, double ci) {
    e.a[i] = ci * power;
    e.terms = i + 1;
    negligible = std::abs(e.a[i]) * reach_power <= 1e-17 * scale ? negligible + 1 : 0;
    if (negligible == 2) return false;
    power *= h / (i + 2);
    reach_power *= cover;
    return true;
  });
}

// The cubic Hermite's extremum (max for sgn = +1) over the intervals either side of sample k.
StepMeasure::Found StepMeasure::refine_extremum(int row, int k, double sgn) const {
  const double fk = value(row, k);
  Found best = k + 1 < count_ ? Found{fk, k, 0.0} : Found{fk, k - 1, 1.0};
  for (int j : {k - 1, k}) {
    if (j < 0 || j + 1 >= count_) continue;
    const auto [v, sp] = interval(row, j).extremum(sgn);
    if (sgn * v > sgn * best.v) best = {v, j, sp};
  }
  return best;
}

// The same extremum on the exact response: Newton on the exact slope from the Hermite's
// location, the exact value there (never worse than the samples either side).
StepMeasure::Found StepMeasure::polish(Found f, int row, double sgn) const {
  const double ends[2] = {value(row, f.j), value(row, f.j + 1)};
  // Only an extremum strictly between the samples and beyond both by more than rounding (a
  // response that starts flat has a Hermite "extremum" 1e-20 below its first sample) needs it.
  const double rounding = 1e-12 * (row == 0 ? y_scale_ : u_scale_);
  const double beyond = sgn * f.v - std::max(sgn * ends[0], sgn * ends[1]);
  if (!(f.s > 0.0 && f.s < 1.0) || !(beyond > rounding)) return f;
  ExactSeries e;
  if (!exact_on(f.j, row, f.s, 0.5, e)) return f;
  // One Newton step on the exact slope from the Hermite's location (off by O(h⁴)): the value
  // there is the exact maximum to rounding (its error is quadratic in the location's).
  const double c = e.curvature(f.s);
  double sp = c != 0.0 ? f.s - e.slope(f.s) / c : f.s;
  if (!(sp > 0.0 && sp < 1.0)) sp = f.s;
  Found best{e.value(sp), f.j, sp};
  for (int k : {f.j, f.j + 1})
    if (sgn * ends[k - f.j] > sgn * best.v) best = {ends[k - f.j], f.j, static_cast<double>(k - f.j)};
  return best;
}

// The peak: the sample maximum refined, then every other sample maximum of f beyond y∞ that
// could beat it between samples (two nearly equal peaks of a lightly damped loop); the winner on
// the exact response. Then the overshoot and, when there is one, the peak time, the next peak and
// the dip after the peak.
void StepMeasure::peak(StepMetrics& m) const {
  Found peak = refine_extremum(0, k_max_, sign_);
  for_each_turn(0, true, [&](int k) {
    if (k == k_max_ || fn(k) + reach(k) < peak.v * inv_ - 1.0) return;
    const Found f = refine_extremum(0, k, sign_);
    if (sign_ * f.v > sign_ * peak.v) peak = f;
  });
  peak = polish(peak, 0, sign_);
  const double peak_n = peak.v * inv_;
  if (!(peak_n > 1.0 + 1e-9)) return;
  m.overshoot_pct = (peak_n - 1.0) * 100.0;
  peak = latest_tied_peak(peak, peak_n);
  m.peak_time_s = time_of(peak);
  next_peak(peak, peak_n, m);
  post_peak_dip(peak, m);
}

// The peak time's hump: the latest within kPeakTieFraction of the highest (two humps of nearly
// equal height are one knife edge apart; the later one is the conservative reading).
StepMeasure::Found StepMeasure::latest_tied_peak(Found peak, double peak_n) const {
  const Found top = peak;
  for_each_turn(std::max(0, top.j) / 64, true, [&](int k) {
    if (k <= peak.j + 1 || fn(k) + reach(k) < peak_n - 1.0 - kPeakTieFraction) return;
    const Found f = polish(refine_extremum(0, k, sign_), 0, sign_);
    if (f.v * inv_ >= peak_n - kPeakTieFraction && time_of(f) > time_of(peak)) peak = f;
  });
  return peak;
}

// The highest hump after the peak (StepMetrics::next_peak_*, what the search's margin reads).
void StepMeasure::next_peak(const Found& peak, double peak_n, StepMetrics& m) const {
  std::optional<Found> next;
  for_each_turn(std::max(0, peak.j) / 64, true, [&](int k) {
    if (k <= peak.j + 1 || (next && fn(k) + reach(k) < next->v * inv_ - 1.0)) return;
    const Found f = refine_extremum(0, k, sign_);
    if (time_of(f) > *m.peak_time_s && (!next || sign_ * f.v > sign_ * next->v)) next = f;
  });
  if (next) {
    m.next_peak_time_s = time_of(*next);
    m.next_peak_gap_pct = std::max(0.0, (peak_n - next->v * inv_) * 100.0);
  }
}

// The deepest fall below y∞ after the peak: sample minima of f below y∞, refined likewise.
void StepMeasure::post_peak_dip(const Found& peak, StepMetrics& m) const {
  Found dip{y_inf_, -1, 0.0};
  for_each_turn(std::max(0, peak.j) / 64, false, [&](int k) {
    if (k <= peak.j || fn(k) - reach(k) > dip.v * inv_ - 1.0) return;
    const Found f = refine_extremum(0, k, -sign_);
    if (-sign_ * f.v > -sign_ * dip.v && time_of(f) > *m.peak_time_s) dip = f;
  });
  // The horizon's last sample is no turning point, but where the response still creeps toward y∞
  // from short of it there, it is the lowest point after the peak that the run sees (the
  // definition's min over t > t_peak; a slow PI zero's tail does this). An exact sample: no refining.
  const int last = count_ - 1;
  if (last > std::max(peak.j, 0) + 1 && fn(last) < 0.0 && -sign_ * y_[last] > -sign_ * dip.v &&
      t(last) > *m.peak_time_s) {
    m.post_peak_dip_pct = std::max(0.0, -fn(last) * 100.0);
    return;
  }
  if (dip.j >= 0) {
    // The dip decides whether the peak counts (design.hpp, effective_peak_time): on the exact
    // response when it comes within 1 % of the overshoot, else the Hermite's value stands.
    const double hermite = -(dip.v * inv_ - 1.0) * 100.0;
    const bool close = std::abs(hermite - m.overshoot_pct) <= 0.01 * m.overshoot_pct;
    m.post_peak_dip_pct = std::max(0.0, close ? -(polish(dip, 0, -sign_).v * inv_ - 1.0) * 100.0 : hermite);
  }
}

// Undershoot only where the response really goes the wrong way: a sample beyond zero, or an
// exact initial slope pointing away from y∞. Otherwise it is exactly 0: between samples that
// never cross zero, the cubic interpolant of a response starting flat (y = y' = 0 at t = 0)
// can dip by rounding-sized amounts that are not in the response.
void StepMeasure::undershoot(StepMetrics& m) const {
  m.undershoot_pct = 0.0;
  if (y_[k_min_] * inv_ < 0.0 || (y_[0] * inv_ <= 0.0 && dy(0) * inv_ < 0.0)) {
    const Found low = polish(refine_extremum(0, k_min_, -sign_), 0, -sign_);
    m.undershoot_pct = std::max(0.0, -low.v * inv_) * 100.0;
  }
}

void StepMeasure::effort(StepMetrics& m) const {
  const double u_sign = value(1, k_effort_) >= 0.0 ? 1.0 : -1.0;
  m.effort_peak = std::abs(polish(refine_extremum(1, k_effort_, u_sign), 1, u_sign).v);
}

// The time y crosses level_n·y∞ in (k_after − 1, k_after), k_after the first sample at/above it.
double StepMeasure::crossing_time(int k_after, double level_n) const {
  if (k_after <= 0) return 0.0;
  const double s = interval(0, k_after - 1).crossing(level_n * y_inf_);
  return t(k_after - 1) + s * (t(k_after) - t(k_after - 1));
}

// Rise time from the first samples at/above 10 % and 90 % (each scan stops early); the first
// entry into the band: the first sample inside it, or the first interval that jumps across it (a
// fast rise can pass from below the band to above it between two samples: e changes sign there).
void StepMeasure::rise_and_band_entry(StepMetrics& m) const {
  const double* y = y_;
  const int K = count_;
  int k10 = -1, k90 = -1;
  for (int k = 0; k < K; ++k)
    if (y[k] * inv_ >= 0.1) { k10 = k; break; }
  for (int k = std::max(k10, 0); k10 >= 0 && k < K; ++k)
    if (y[k] * inv_ >= 0.9) { k90 = k; break; }
  int k_entry = std::min(bits_.first_inside(), bits_.next_sign_change(1));
  if (k_entry >= K) k_entry = -1;
  if (k10 >= 0 && k90 >= 0) m.rise_time_s = crossing_time(k90, 0.9) - crossing_time(k10, 0.1);
  if (k_entry == 0) {
    m.band_entry_time_s = 0.0;
  } else if (k_entry > 0) {
    const double side = (y[k_entry - 1] * inv_ > 1.0) ? 1.0 : -1.0;
    const double s = interval(0, k_entry - 1).crossing((1.0 + side * s_.band_fraction) * y_inf_);
    m.band_entry_time_s = t(k_entry - 1) + s * (t(k_entry) - t(k_entry - 1));
  }
}

// The last time in interval j outside the band, or −1. Where the interpolant's extremum comes
// within 1 % of the band's half-width of an edge, the exact response decides (its stationary
// points by Newton from the Hermite's).
double StepMeasure::exit_in(int j) const {
  const double band = s_.band_fraction;
  const double band_lo = y_inf_ > 0.0 ? (1.0 - band) * y_inf_ : (1.0 + band) * y_inf_;
  const double band_hi = y_inf_ > 0.0 ? (1.0 + band) * y_inf_ : (1.0 - band) * y_inf_;
  const Hermite hm = interval(0, j);
  double st[2];
  const int ns = hm.stationary(st);
  double closest = std::numeric_limits<double>::infinity();
  for (int i = 0; i < ns; ++i) {
    const double v = hm.value(st[i]);
    closest = std::min({closest, std::abs(v - band_hi), std::abs(v - band_lo)});
  }
  double sp = -1.0;
  ExactSeries e;
  if (closest < 0.01 * band * std::abs(y_inf_) && exact_on(j, 0, 0.0, 1.0, e)) {
    double se[2];
    for (int i = 0; i < ns; ++i) se[i] = e.stationary_near(st[i]);
    if (ns == 2 && se[0] > se[1]) std::swap(se[0], se[1]);
    sp = last_outside_of(e, se, ns, y_[j], y_[j + 1], band_lo, band_hi);
  } else {
    sp = hm.last_outside(band_lo, band_hi);
  }
  return sp < 0.0 ? -1.0 : t(j) + sp * (t(j + 1) - t(j));
}

// Settling: the last time y is outside the band. After the last sample outside it, y can still
// leave the band between two samples inside it (a slow hump peaking just beyond the edge): that
// needs an extremum of f between those samples, next to a sample extremum of f (the grid
// resolves every mode, h·|p| ≤ 1/2, so an extremum between samples shows as a turn of the
// samples) beyond band/2 whose samples could reach the edge; only those intervals are examined,
// from the last one back.
void StepMeasure::settling(StepMetrics& m) const {
  const double band_fraction = s_.band_fraction;
  const int k_outside = bits_.last_outside();
  if (!(k_outside + 1 < count_)) return;
  double last_exit = -1.0;
  for (int w = bits_.words() - 1; w >= 0 && last_exit < 0.0 && 64 * w + 63 > k_outside; --w) {
    const std::uint64_t cand = (bits_.turns(w, f_follows_y_, true) & bits_.beyond(w, f_follows_y_)) |
                               (bits_.turns(w, f_follows_y_, false) & ~bits_.beyond(w, f_follows_y_));
    for (std::uint64_t c = cand; c && last_exit < 0.0; c &= ~(std::uint64_t{1} << (63 - std::countl_zero(c)))) {
      const int k = 64 * w + 63 - std::countl_zero(c);
      if (k <= k_outside) break;
      const double dev = std::abs(fn(k));
      if (dev <= 0.5 * band_fraction || dev + reach(k) <= band_fraction) continue;
      for (int j : {k, k - 1})
        if (j > k_outside && last_exit < 0.0) last_exit = exit_in(j);
    }
  }
  if (last_exit < 0.0 && k_outside >= 0) last_exit = exit_in(k_outside);
  m.settling_time_s = std::max(0.0, last_exit);
}

}  // namespace

StepStatus measure_step(const SimulatedStep& step, StepMetrics& m) {
  SampleExtremes ex =
      scan_samples(step.y, step.u, step.count, step.y_inf, 1.0 / step.y_inf, step.band_fraction, step.bits);
  if (!step.u) {  // u = u_const + u_gain·y, monotone in y (rounding is monotone): its extremes are exact
    const double at_hi = step.layout.effort(ex.y_hi), at_lo = step.layout.effort(ex.y_lo);
    ex.u_hi = std::max(at_hi, at_lo);
    ex.u_lo = std::min(at_hi, at_lo);
  }
  if (!std::isfinite(ex.y_hi) || !std::isfinite(ex.y_lo) || !std::isfinite(ex.u_hi) || !std::isfinite(ex.u_lo))
    return StepStatus::numerical_failure;
  const StepMeasure measure(step, ex);
  measure.integrals(m);
  measure.peak(m);
  measure.undershoot(m);
  measure.effort(m);
  measure.rise_and_band_entry(m);
  measure.settling(m);
  if (!std::isfinite(m.overshoot_pct) || !std::isfinite(m.effort_peak) || !std::isfinite(m.itae))
    return StepStatus::numerical_failure;
  return StepStatus::ok;
}

}  // namespace specloop::exact_step
