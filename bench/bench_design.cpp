// Benchmark (not a test): `design` on the demo specs. Prints, per spec, the wall time of the whole
// design run (median of repeats), the search's evaluations per second, and, with --compare, the
// search outcome for several NLopt algorithm pairs at the same budget (how the defaults were chosen).
#include <algorithm>
#include <chrono>
#include <cstring>
#include <fmt/format.h>
#include <string>
#include <vector>

#include "specloop/design/design.hpp"

using namespace specloop;

int main(int argc, char** argv) {
  std::vector<std::string> specs;
  bool compare = false;
  int repeats = 5;
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--compare") == 0) compare = true;
    else if (std::strcmp(argv[i], "--repeats") == 0 && i + 1 < argc) repeats = std::stoi(argv[++i]);
    else specs.emplace_back(argv[i]);
  }
  for (const std::string& path : specs) {
    const Spec spec = load_spec(path);
    std::vector<double> times;
    DesignRun run;
    for (int r = 0; r < repeats; ++r) {
      const auto t0 = std::chrono::steady_clock::now();
      run = run_design(spec);
      times.push_back(std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
    }
    std::sort(times.begin(), times.end());
    const auto& s = run.search;
    fmt::print("design {} median_s {:.4f} search_s {:.4f} evaluations {} evals_per_s {:.0f} feasible {}\n",
               spec.name, times[times.size() / 2], s.wall_time_s, s.evaluations, s.evaluations / s.wall_time_s,
               s.feasible ? "yes" : "no");
    if (!compare) continue;
    const Problem& problem = run.problem;
    const Design* classical = run.find(DesignRole::classical);
    std::vector<double> seed;
    if (classical) seed = classical->controller.series;
    else for (const auto& [lo, hi] : problem.bounds) seed.push_back(std::sqrt(lo * hi));
    const std::vector<std::pair<std::string, std::string>> pairs{
        {"GN_DIRECT_L,GN_CRS2_LM", "LN_SBPLX"}, {"GN_CRS2_LM", "LN_SBPLX"}, {"GN_CRS2_LM", "LN_NELDERMEAD"}, {"GN_DIRECT_L", "LN_SBPLX"},
        {"GN_ISRES", "LN_SBPLX"},   {"GN_ESCH", "LN_SBPLX"},       {"GN_CRS2_LM", "LN_COBYLA"}};
    for (const auto& [global, local] : pairs) {
      double total = 0.0;
      int feasible = 0;
      double best = 1e300, worst = 0.0;
      const int seeds = 5;
      for (unsigned seed_value = 1; seed_value <= static_cast<unsigned>(seeds); ++seed_value) {
        SearchOptions o = search_options(spec);
        o.global_algorithm = global;
        o.local_algorithm = local;
        o.seed = seed_value;
        const auto t0 = std::chrono::steady_clock::now();
        const SearchResult r = optimize(problem, seed, o);
        total += std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
        if (r.summary.feasible) {
          ++feasible;
          best = std::min(best, r.summary.best_objective);
          worst = std::max(worst, r.summary.best_objective);
        }
      }
      fmt::print("  {:>22} + {:<14} feasible {}/{}  objective best {:.5g} worst {:.5g}  mean time {:.3f} s\n", global,
                 local, feasible, seeds, best, worst, total / seeds);
    }
  }
  return 0;
}
