// The fit's model kinds (model.hpp): names, parameters, realizations, and the exact delayed
// zero-order-hold response on the recorded input.
#include "specloop/fit/model.hpp"

#include <fmt/format.h>
#include <unsupported/Eigen/MatrixFunctions>

#include <algorithm>
#include <array>
#include <cmath>
#include <stdexcept>

namespace specloop::fit {

namespace {

struct KindName {
  ModelKind kind;
  std::string_view name;
};
constexpr std::array<KindName, 5> kKinds{{{ModelKind::first_order_delay, "first-order-delay"},
                                           {ModelKind::second_order_delay, "second-order-delay"},
                                           {ModelKind::underdamped_delay, "underdamped-delay"},
                                           {ModelKind::integrator_delay, "integrator-delay"},
                                           {ModelKind::poles_zeros, "poles-zeros"}}};

// Coefficients of Π(s + r_i), highest power first.
std::vector<double> monic_from_rates(std::span<const double> rates) {
  std::vector<double> c{1.0};
  for (double r : rates) {
    std::vector<double> next(c.size() + 1, 0.0);
    for (std::size_t i = 0; i < c.size(); ++i) {
      next[i] += c[i];
      next[i + 1] += r * c[i];
    }
    c = std::move(next);
  }
  return c;
}

}  // namespace

std::string_view kind_name(ModelKind k) {
  for (const auto& e : kKinds)
    if (e.kind == k) return e.name;
  return "?";
}

std::optional<ModelKind> parse_kind(std::string_view name) {
  for (const auto& e : kKinds)
    if (e.name == name) return e.kind;
  return std::nullopt;
}

const std::vector<std::string>& kind_names() {
  static const std::vector<std::string> names = [] {
    std::vector<std::string> v;
    for (const auto& e : kKinds) v.emplace_back(e.name);
    return v;
  }();
  return names;
}

std::vector<std::string> parameter_names(const ModelShape& shape) {
  switch (shape.kind) {
    case ModelKind::first_order_delay: return {"k", "T", "L"};
    case ModelKind::second_order_delay: return {"k", "T1", "T2", "L"};
    case ModelKind::underdamped_delay: return {"k", "wn", "zeta", "L"};
    case ModelKind::integrator_delay: return {"k", "T", "L"};
    case ModelKind::poles_zeros: {
      std::vector<std::string> names{"k"};
      for (int i = 1; i <= shape.poles; ++i) names.push_back(fmt::format("p{}", i));
      for (int i = 1; i <= shape.zeros; ++i) names.push_back(fmt::format("z{}", i));
      names.emplace_back("L");
      return names;
    }
  }
  return {};
}

StateModel realize(const ModelShape& shape, std::span<const double> p) {
  StateModel m;
  switch (shape.kind) {
    case ModelKind::first_order_delay:
      m.A = Eigen::MatrixXd::Constant(1, 1, -1.0 / p[1]);
      m.B = Eigen::VectorXd::Constant(1, p[0] / p[1]);
      m.C = Eigen::RowVectorXd::Constant(1, 1.0);
      m.delay = p[2];
      break;
    case ModelKind::second_order_delay:  // cascade: x1 the first lag's output, x2 the second's
      m.A.resize(2, 2);
      m.A << -1.0 / p[1], 0.0, 1.0 / p[2], -1.0 / p[2];
      m.B.resize(2);
      m.B << p[0] / p[1], 0.0;
      m.C.resize(2);
      m.C << 0.0, 1.0;
      m.delay = p[3];
      break;
    case ModelKind::underdamped_delay: {
      const double wn = p[1], zeta = p[2];
      m.A.resize(2, 2);  // x1 = y/wn (scaled by the natural frequency), x2 = y'/wn²
      m.A << 0.0, wn, -wn, -2.0 * zeta * wn;
      m.B.resize(2);
      m.B << 0.0, p[0] * wn;
      m.C.resize(2);
      m.C << 1.0, 0.0;
      m.delay = p[3];
      break;
    }
    case ModelKind::integrator_delay:  // x1 the lag's output, x2 its integral
      m.A.resize(2, 2);
      m.A << -1.0 / p[1], 0.0, 1.0, 0.0;
      m.B.resize(2);
      m.B << p[0] / p[1], 0.0;
      m.C.resize(2);
      m.C << 0.0, 1.0;
      m.delay = p[2];
      break;
    case ModelKind::poles_zeros: {
      const int n = shape.poles, z = shape.zeros;
      const std::span<const double> poles = p.subspan(1, static_cast<std::size_t>(n));
      const std::span<const double> zeros = p.subspan(1 + static_cast<std::size_t>(n), static_cast<std::size_t>(z));
      const std::vector<double> a = monic_from_rates(poles);  // Π(s + p_i)
      std::vector<double> b = monic_from_rates(zeros);         // Π(s + z_j), scaled to the static gain k
      double scale = p[0];
      for (double r : poles) scale *= r;
      for (double r : zeros) scale /= r;
      for (double& c : b) c *= scale;
      // Controllable companion form (at most four states here).
      m.A = Eigen::MatrixXd::Zero(n, n);
      for (int i = 0; i + 1 < n; ++i) m.A(i, i + 1) = 1.0;
      for (int j = 0; j < n; ++j) m.A(n - 1, j) = -a[static_cast<std::size_t>(n - j)];
      m.B = Eigen::VectorXd::Zero(n);
      m.B(n - 1) = 1.0;
      m.C = Eigen::RowVectorXd::Zero(n);
      for (int j = 0; j <= z; ++j) m.C(j) = b[static_cast<std::size_t>(z - j)];
      m.delay = p[static_cast<std::size_t>(1 + n + z)];
      break;
    }
  }
  return m;
}

ResponseSimulator::ResponseSimulator(std::vector<double> t, std::vector<double> du) : t_(std::move(t)), du_(std::move(du)) {
  if (t_.size() != du_.size() || t_.size() < 2) throw std::invalid_argument("ResponseSimulator: t and du of equal length ≥ 2");
  quantum_ = 1e-13 * (t_.back() - t_.front());
}

const ResponseSimulator::Step& ResponseSimulator::step_for(const StateModel& model, std::int64_t quanta) {
  for (std::size_t i = 0; i < recent_q_.size(); ++i)
    if (recent_q_[i] == quanta) return cache_[recent_index_[i]];
  std::size_t index = 0;
  const auto found = cache_index_.find(quanta);
  if (found != cache_index_.end()) {
    index = found->second;
  } else {
    const double h = double(quanta) * quantum_;
    const Eigen::Index n = model.A.rows();
    Step s;
    if (n == 1) {
      const double a = model.A(0, 0);
      s.phi[0] = std::exp(a * h);
      // (e^{ah} − 1)/a without cancellation for small a·h.
      const double integral = std::abs(a * h) < 1e-5 ? h * (1.0 + a * h / 2.0 + a * a * h * h / 6.0) : std::expm1(a * h) / a;
      s.gamma[0] = integral * model.B(0);
    } else {
      Eigen::MatrixXd aug = Eigen::MatrixXd::Zero(n + 1, n + 1);
      aug.topLeftCorner(n, n) = model.A * h;
      aug.topRightCorner(n, 1) = model.B * h;
      const Eigen::MatrixXd e = aug.exp();
      for (Eigen::Index i = 0; i < n; ++i) {
        for (Eigen::Index j = 0; j < n; ++j) s.phi[static_cast<std::size_t>(i * n + j)] = e(i, j);
        s.gamma[static_cast<std::size_t>(i)] = e(i, n);
      }
    }
    ++exponentials_;
    index = cache_.size();
    cache_index_.emplace(quanta, index);
    cache_.push_back(s);
  }
  // Round-robin replacement in the small table of recent lengths.
  recent_q_[next_recent_] = quanta;
  recent_index_[next_recent_] = index;
  next_recent_ = (next_recent_ + 1) % recent_q_.size();
  return cache_[index];
}

// The recurrence for n states known at compile time (the state stays in registers).
template <std::size_t n>
void ResponseSimulator::run(const StateModel& model, std::vector<double>& out) {
  const std::size_t N = t_.size();
  std::array<double, n> x{}, c{};
  for (std::size_t i = 0; i < n; ++i) c[i] = model.C(static_cast<Eigen::Index>(i));
  const double L = model.delay;
  // Instants as whole quanta from t_0: the pieces of an interval add up to it exactly, so no
  // rounding drift accumulates over the record.
  const double t0 = t_[0], per_quantum = 1.0 / quantum_;
  const auto quanta = [&](double t) {
    const double q = (t - t0) * per_quantum;
    return static_cast<std::int64_t>(q >= 0.0 ? q + 0.5 : q - 0.5);
  };
  const auto advance = [&](std::int64_t q, double v) {
    if (q <= 0) return;
    const Step* s = nullptr;
    for (std::size_t r = 0; r < recent_q_.size(); ++r)
      if (recent_q_[r] == q) s = &cache_[recent_index_[r]];
    if (s == nullptr) s = &step_for(model, q);
    std::array<double, n> next;
    for (std::size_t i = 0; i < n; ++i) {
      double acc = s->gamma[i] * v;
      for (std::size_t j = 0; j < n; ++j) acc += s->phi[i * n + j] * x[j];
      next[i] = acc;
    }
    x = next;
  };
  // j: the next delayed switching instant t_j + L; v: the delayed input's value now.
  std::size_t j = 0;
  double v = 0.0;
  while (j < N && t_[j] + L <= t_[0]) v = du_[j++];
  std::int64_t at_k = 0;
  for (std::size_t k = 0; k + 1 < N; ++k) {
    std::int64_t at = at_k;
    const double end = t_[k + 1];
    const std::int64_t end_q = quanta(end);
    while (j < N && t_[j] + L < end) {
      const std::int64_t s = std::min(quanta(t_[j] + L), end_q);
      if (s > at) {
        advance(s - at, v);
        at = s;
      }
      v = du_[j++];
    }
    advance(end_q - at, v);
    at_k = end_q;
    double y = 0.0;
    for (std::size_t i = 0; i < n; ++i) y += c[i] * x[i];
    out[k + 1] = y;
  }
}

void ResponseSimulator::simulate(const StateModel& model, std::vector<double>& out) {
  cache_index_.clear();
  cache_.clear();
  cache_.reserve(16);
  recent_q_.fill(-1);
  next_recent_ = 0;
  out.assign(t_.size(), 0.0);
  switch (model.A.rows()) {
    case 1: run<1>(model, out); break;
    case 2: run<2>(model, out); break;
    case 3: run<3>(model, out); break;
    case 4: run<4>(model, out); break;
    case 5: run<5>(model, out); break;
    case 6: run<6>(model, out); break;
    case 7: run<7>(model, out); break;
    case 8: run<8>(model, out); break;
    default: throw std::invalid_argument("ResponseSimulator: 1 to 8 states");
  }
}

}  // namespace specloop::fit
