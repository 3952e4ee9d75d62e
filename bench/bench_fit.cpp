// Benchmark (not a test): `specloop fit`'s estimation on 10,000 samples. Prints the median wall
// time of fitting first-order-delay alone and of all five kinds (the default set), each over
// --repeats runs, on a recorded test given with --csv (time, input, output: the same file a SciPy
// comparison fits) or, without it, on an invented heater bump test generated here: k = 2, T = 3 s,
// L = 0.7 s, a unit step at t = 10 s, 10,000 samples at 0.01 s, Gaussian noise σ = 0.01 (seed 1).
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstring>
#include <functional>
#include <fmt/format.h>
#include <random>
#include <string>
#include <vector>

#include "specloop/fit/estimate.hpp"

using namespace specloop::fit;

namespace {

TestRecord invented_test() {
  TestRecord r;
  r.file = "invented heater bump test";
  r.time_column = "t";
  r.input_column = "u";
  r.output_column = "y";
  std::mt19937_64 rng(1);
  std::normal_distribution<double> noise(0.0, 0.01);
  for (int i = 0; i < 10000; ++i) {
    const double t = 0.01 * i;
    const double u = t >= 10.0 ? 1.0 : 0.0;
    const double y = t >= 10.7 ? 2.0 * (1.0 - std::exp(-(t - 10.7) / 3.0)) : 0.0;
    r.t.push_back(t);
    r.u.push_back(u);
    r.y.push_back(y + noise(rng));
    r.line.push_back(i + 2);
  }
  return r;
}

double median_seconds(int repeats, const std::function<void()>& run) {
  std::vector<double> times;
  for (int i = 0; i < repeats; ++i) {
    const auto t0 = std::chrono::steady_clock::now();
    run();
    times.push_back(std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
  }
  std::sort(times.begin(), times.end());
  return times[times.size() / 2];
}

}  // namespace

int main(int argc, char** argv) {
  std::string csv;
  int repeats = 5;
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--csv") == 0 && i + 1 < argc) csv = argv[++i];
    else if (std::strcmp(argv[i], "--repeats") == 0 && i + 1 < argc) repeats = std::stoi(argv[++i]);
  }
  const PreparedData d = prepare_test_data(csv.empty() ? invented_test() : read_test_csv(csv, {}), std::nullopt, std::nullopt);
  const FitOptions options;
  ModelFit first;
  const double one = median_seconds(repeats, [&] { first = fit_model(d, {ModelKind::first_order_delay, 0, 0}, options); });
  fmt::print("fit first-order-delay samples {} median_s {:.4f} iterations {} k {:.6g} T {:.6g} L {:.6g} status {}\n", d.dy.size(),
             one, first.iterations, first.values[0], first.values[1], first.values[2], status_name(first.status));
  const std::vector<ModelShape> all{{ModelKind::first_order_delay, 0, 0}, {ModelKind::second_order_delay, 0, 0},
                                    {ModelKind::underdamped_delay, 0, 0}, {ModelKind::integrator_delay, 0, 0},
                                    {ModelKind::poles_zeros, 2, 1}};
  FitResult r;
  const double five = median_seconds(repeats, [&] { r = fit_models(d, all, options); });
  fmt::print("fit all-five samples {} median_s {:.4f}", d.dy.size(), five);
  for (const ModelFit& f : r.models) fmt::print(" {} {:.4f}s/{}it", kind_name(f.shape.kind), f.seconds, f.iterations);
  fmt::print("\n");
  return 0;
}
