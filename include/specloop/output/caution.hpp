// The safety caution every report (design and sweep), the terminal output and the README carry.
#pragma once

namespace specloop {

/// The safety caution every report and the README carry.
inline constexpr const char* kSafetyCaution =
    "A simulated design is not a verified machine: validate on the real system with interlocks, and defer to local "
    "codes, applicable functional-safety standards and licensed engineering practice.";

}  // namespace specloop
