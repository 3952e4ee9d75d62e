// Second-order relations: overshoot ↔ damping ratio, peak and settling time from a pole.
#include "specloop/core/second_order.hpp"

#include <cmath>
#include <numbers>
#include <stdexcept>

namespace specloop {

double damping_from_overshoot(double overshoot_pct) {
  if (!(overshoot_pct > 0.0 && overshoot_pct < 100.0))
    throw std::domain_error("overshoot must lie in (0, 100) %");
  const double l = std::log(overshoot_pct / 100.0);
  return -l / std::sqrt(std::numbers::pi * std::numbers::pi + l * l);
}

double overshoot_from_damping(double zeta) {
  if (zeta >= 1.0) return 0.0;
  if (zeta <= -1.0) throw std::domain_error("damping ratio must exceed -1");
  return 100.0 * std::exp(-zeta * std::numbers::pi / std::sqrt(1.0 - zeta * zeta));
}

SecondOrderPrediction predict_second_order(Complex pole, double band_fraction) {
  const double sigma = -pole.real();
  const double wd = std::abs(pole.imag());
  if (!(sigma > 0.0) || !(wd > 0.0))
    throw std::domain_error("second-order prediction needs a stable complex pole");
  SecondOrderPrediction p;
  p.natural_frequency = std::abs(pole);
  p.damping_ratio = sigma / p.natural_frequency;
  p.overshoot_pct = overshoot_from_damping(p.damping_ratio);
  p.peak_time_s = std::numbers::pi / wd;
  p.settling_time_s = -std::log(band_fraction) / sigma;
  return p;
}

}  // namespace specloop
