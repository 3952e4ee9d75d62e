// Measurement noise for the nonlinear loop: the platform-independent Gaussian sequence and the
// held noise a run reads (nonlinear.hpp, "Measurement noise").
#include <cmath>
#include <random>
#include <string>

#include "sim/nonlinear_run.hpp"
#include "specloop/sim/nonlinear.hpp"

namespace specloop {

std::vector<double> gaussian_sequence(double rms, std::uint64_t seed, std::size_t count) {
  std::mt19937_64 bits(seed);
  const auto uniform = [&] {  // in (0, 1]: 53 random bits, never 0 (log below)
    return (static_cast<double>(bits() >> 11) + 1.0) * 0x1.0p-53;
  };
  std::vector<double> out;
  out.reserve(count + 1);
  while (out.size() < count) {
    const double radius = rms * std::sqrt(-2.0 * std::log(uniform())), angle = 2.0 * M_PI * uniform();
    out.push_back(radius * std::cos(angle));
    out.push_back(radius * std::sin(angle));
  }
  out.resize(count);
  return out;
}

namespace nonlinear_loop {

MeasurementNoise measurement_noise(const LoopOptions& options, double period, double horizon, NonlinearResult& result) {
  using std::to_string;
  MeasurementNoise noise;
  if (!(options.noise_rms > 0.0)) return noise;
  noise.period = options.noise_period_s > 0.0 ? options.noise_period_s : (period > 0.0 ? period : horizon / 2000.0);
  result.noise_period_s = noise.period;
  if (horizon / noise.period > 1e6) fail("noise_period_s: more than 1e6 noise values per horizon");
  noise.values = gaussian_sequence(options.noise_rms, options.noise_seed,
                                   static_cast<std::size_t>(std::floor(horizon / noise.period)) + 2);
  result.notes.push_back("measurement noise: " + to_string(options.noise_rms) + " rms, held for " +
                         to_string(noise.period) + " s per value, seed " + to_string(options.noise_seed) +
                         "; metrics read on the noise-free plant output");
  return noise;
}

}  // namespace nonlinear_loop
}  // namespace specloop
