// A recorded test (time, input as applied, output as measured) read from CSV, checked, and
// prepared for fitting: the operating point, the deviations from it, what kind of excitation it is.
#pragma once

#include <cstddef>
#include <optional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <vector>

namespace specloop::fit {

/// Bad data or a bad request about the data (exit 2). The message names the file, and where it
/// can, the line and the column: "test.csv:12: column 'y' (3): empty cell".
class FitDataError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// Which columns to read, by header name; an empty name takes the default position (time, input,
/// output = the first three columns in that order).
struct ColumnChoice {
  std::string time, input, output;
};

/// The samples as read, with the source line of each (for messages).
struct TestRecord {
  std::string file;
  std::string time_column, input_column, output_column;
  std::vector<double> t, u, y;
  std::vector<int> line;
};

/// The fewest samples a fit accepts.
inline constexpr std::size_t kMinSamples = 20;
/// The fewest leading samples of constant input that make an operating point.
inline constexpr std::size_t kMinSteadySamples = 5;

/// Parses CSV text: one header row, then one sample per row; the separator is ',' or ';' (the one
/// the header row uses); '#' starts a comment (whole line or the rest of a line); blank lines are
/// skipped. Checks every cell (a number, not empty, finite), the time (strictly increasing) and the
/// count. Throws FitDataError with file, line and column. `path` is used in messages only.
TestRecord parse_test_csv(std::string_view text, const std::string& path, const ColumnChoice& columns);
/// The same from a file (a missing or unreadable file is a FitDataError too).
TestRecord read_test_csv(const std::string& path, const ColumnChoice& columns);

enum class Excitation { step, steps, other };
std::string_view excitation_name(Excitation e);  // "step", "steps", "other"

/// The record ready to fit: deviations du = u − u0, dy = y − y0 from the operating point.
struct PreparedData {
  TestRecord record;
  double u0 = 0.0, y0 = 0.0;
  bool u0_given = false, y0_given = false;
  std::size_t steady_samples = 0;  // the leading steady stretch (0 when both were given)
  Excitation excitation = Excitation::other;
  std::size_t input_changes = 0;   // samples where u differs from the sample before
  std::size_t first_change = 0;    // index of the first sample whose input differs from u[0]
  double median_dt = 0.0;
  double noise_sigma = 0.0;        // σ of y's noise, from its second differences (robust scale)
  std::vector<double> du, dy;
};

/// Checks the excitation and the response and finds the operating point.
/// The leading steady stretch: the samples before the input first changes (the input as applied
/// holds its value exactly), at least kMinSteadySamples of them, over which the output shows no
/// trend larger than its noise (a straight-line fit's change across the stretch within 4 standard
/// errors of the line's residuals, or within 1 % of the output's range). u0 = the input there,
/// y0 = the output's mean there. `u0`/`y0` given override it (both given: no stretch needed).
/// Throws FitDataError: an input that never changes, an output that does not respond (its range
/// after the input first changes no more than twice its range in the steady stretch, or zero), no
/// usable steady stretch and no --u0/--y0.
PreparedData prepare_test_data(TestRecord record, std::optional<double> u0, std::optional<double> y0);

}  // namespace specloop::fit
