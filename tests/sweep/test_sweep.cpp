// Unit tests for sweep grids: axis syntax (linear, geometric, lists), the Cartesian numbering
// (first axis slowest), shard selection, the store's hash, point spec texts and key checks.
// Expected values are computed by hand in the comments beside them.
#include <catch2/catch.hpp>
#include <complex>
#include <filesystem>
#include <fstream>
#include <map>
#include <random>
#include <tuple>
#include <cmath>
#include <set>
#include <string>
#include <vector>

#include "specloop/spec/spec.hpp"
#include "specloop/sweep/sweep.hpp"
#include "specloop/sweep/sweep_report.hpp"

using namespace specloop;

namespace {

std::string temp_spec(const std::string& name, const std::string& text) {
  const auto path = std::filesystem::temp_directory_path() / ("specloop_test_sweep_" + name + ".toml");
  std::ofstream(path) << text;
  return path.string();
}

const char* kSpec = R"(title = "fan speed"
[plant]
poles = [-1.0, [-4.0, 3.0], -40.0]
gain = 160.0
delay = 0.0
[controller]
structure = "pi"
[requirements]
overshoot_max_pct = 12.0
settling_time_max = 4
[search]
max_evaluations = 200
)";

}  // namespace

TEST_CASE("linear axis: FROM:TO:COUNT is evenly spaced with exact ends", "[sweep]") {
  const SweepAxis a = parse_sweep_axis("requirements.overshoot_max_pct=2:20:4");
  CHECK(a.key == "requirements.overshoot_max_pct");
  // step (20 − 2)/3 = 6: 2, 8, 14, 20
  REQUIRE(a.values.size() == 4);
  CHECK(a.values[0] == 2.0);
  CHECK(a.values[1] == Approx(8.0).epsilon(1e-15));
  CHECK(a.values[2] == Approx(14.0).epsilon(1e-15));
  CHECK(a.values[3] == 20.0);
  const SweepAxis down = parse_sweep_axis("plant.delay=0.5:0:3");  // 0.5, 0.25, 0
  CHECK(down.values == std::vector<double>{0.5, 0.25, 0.0});
  CHECK(parse_sweep_axis("x=3:3:1").values == std::vector<double>{3.0});
}

TEST_CASE("log axis: the suffix makes a geometric sequence", "[sweep]") {
  const SweepAxis a = parse_sweep_axis("requirements.effort_max=1:100:5log");
  // ratio 100^(1/4) = √10: 1, 3.16228, 10, 31.6228, 100
  REQUIRE(a.values.size() == 5);
  CHECK(a.values[0] == 1.0);
  CHECK(a.values[1] == Approx(3.1622776601683795).epsilon(1e-14));
  CHECK(a.values[2] == Approx(10.0).epsilon(1e-14));
  CHECK(a.values[3] == Approx(31.622776601683793).epsilon(1e-14));
  CHECK(a.values[4] == 100.0);
}

TEST_CASE("list axis: values as written, in order", "[sweep]") {
  CHECK(parse_sweep_axis("plant.gain=3, 1.5,-2,1e2").values == std::vector<double>{3.0, 1.5, -2.0, 100.0});
  CHECK(parse_sweep_axis("plant.gain=7").values == std::vector<double>{7.0});
}

TEST_CASE("bad axes are refused with the reason", "[sweep]") {
  auto message = [](const char* text) {
    try {
      parse_sweep_axis(text);
    } catch (const SweepError& e) {
      return std::string(e.what());
    }
    return std::string("(accepted)");
  };
  CHECK_THAT(message("x=1:2:0"), Catch::Contains("COUNT '0' must be an integer >= 1"));
  CHECK_THAT(message("x=0:10:3log"), Catch::Contains("log range needs FROM > 0"));
  CHECK_THAT(message("x=-1:10:3log"), Catch::Contains("log range needs FROM > 0"));
  CHECK_THAT(message("x=1:2"), Catch::Contains("three fields"));
  CHECK_THAT(message("x=a:2:3"), Catch::Contains("FROM 'a'"));
  CHECK_THAT(message("x=1,zz"), Catch::Contains("'zz'"));
  CHECK_THAT(message("x=1:inf:3"), Catch::Contains("TO 'inf'"));
  CHECK_THAT(message("no equals sign"), Catch::Contains("expected KEY="));
  CHECK_THAT(message("=1,2"), Catch::Contains("expected a spec key"));
  CHECK_THAT(message("x=1:2:1"), Catch::Contains("COUNT 1 needs FROM equal to TO"));
}

// Found by fuzzing (tests/fuzz/fuzz_vary.cpp): TO − FROM and TO/FROM overflowed, so a range
// between two finite numbers produced inf (−1e308:1e308:3 had a middle value of inf) or 0 in a
// log range. The values are weighted means of the ends there (of their logarithms for log).
TEST_CASE("ranges whose span or ratio leave the double range keep finite values inside", "[sweep]") {
  const auto inside = [](const SweepAxis& a, double lo, double hi) {
    for (double v : a.values)
      if (!std::isfinite(v) || v < lo || v > hi) return false;
    return true;
  };
  const SweepAxis wide = parse_sweep_axis("k=-1e308:1e308:5");
  REQUIRE(wide.values.size() == 5);
  CHECK(inside(wide, -1e308, 1e308));
  CHECK(wide.values[2] == 0.0);  // −1e308·½ + 1e308·½
  CHECK(wide.values[1] == Approx(-0.5e308).epsilon(1e-15));
  const SweepAxis down = parse_sweep_axis("k=1.7e308:-1.7e308:3");
  CHECK(inside(down, -1.7e308, 1.7e308));
  CHECK(down.values[1] == 0.0);
  const SweepAxis up = parse_sweep_axis("k=1e-300:1e300:3log");  // ratio 1e600 overflows
  CHECK(inside(up, 1e-300, 1e300));
  CHECK(up.values[1] == Approx(1.0).epsilon(1e-12));  // the geometric mean
  const SweepAxis fall = parse_sweep_axis("k=1e300:1e-300:5log");  // ratio 1e-600 underflows to 0
  CHECK(inside(fall, 1e-300, 1e300));
  CHECK(fall.values[2] == Approx(1.0).epsilon(1e-12));
  CHECK(fall.values[1] == Approx(1e150).epsilon(1e-12));
}

// Found by fuzzing: the grid size was a product that wrapped around in 64 bits (four axes of a
// million values made a "grid" of a few points, or a sweep that never started).
TEST_CASE("a grid of more than kMaxGridPoints points is refused, never wrapped", "[sweep]") {
  SweepGrid g;
  g.axes.push_back(parse_sweep_axis("a=1:2:1000000"));
  g.axes.push_back(parse_sweep_axis("b=1:2:10"));
  CHECK(g.size() == kMaxGridPoints);  // 10 000 000 exactly is allowed
  g.axes.push_back(parse_sweep_axis("c=1,2"));
  CHECK_THROWS_WITH(g.size(), Catch::Contains("more than 10000000 points") && Catch::Contains("1000000 × 10 × 2"));
  SweepGrid wrap;  // 2^16 values on four axes: 2^64 points, 0 modulo 2^64
  for (const char* key : {"a", "b", "c", "d"})
    wrap.axes.push_back(parse_sweep_axis(std::string(key) + "=1:2:65536"));
  CHECK_THROWS_AS(wrap.size(), SweepError);
}

TEST_CASE("grid numbering: the first axis varies slowest", "[sweep]") {
  SweepGrid g;
  g.axes.push_back(parse_sweep_axis("a=1,2"));
  g.axes.push_back(parse_sweep_axis("b=10,20,30"));
  REQUIRE(g.size() == 6);
  // index = i_a·3 + i_b
  CHECK(g.point(0) == std::vector<double>{1, 10});
  CHECK(g.point(1) == std::vector<double>{1, 20});
  CHECK(g.point(2) == std::vector<double>{1, 30});
  CHECK(g.point(3) == std::vector<double>{2, 10});
  CHECK(g.point(5) == std::vector<double>{2, 30});
  CHECK(g.canonical() == "a=1,2;b=10,20,30");
  SweepGrid three = g;
  three.axes.push_back(parse_sweep_axis("c=0:1:2"));
  // index 7 = 1·6 + 0·2 + 1 → (2, 10, 1)
  CHECK(three.point(7) == std::vector<double>{2, 10, 1});
  CHECK(three.size() == 12);
}

TEST_CASE("shards are interleaved, disjoint and cover the grid", "[sweep]") {
  CHECK(shard_points(8, parse_shard("2/3")) == std::vector<std::size_t>{1, 4, 7});
  CHECK(shard_points(8, parse_shard("3/3")) == std::vector<std::size_t>{2, 5});
  CHECK(shard_points(3, parse_shard("4/4")).empty());
  std::multiset<std::size_t> all;
  for (int k = 1; k <= 4; ++k)
    for (std::size_t i : shard_points(13, Shard{k, 4})) all.insert(i);
  CHECK(all.size() == 13);
  CHECK(std::set<std::size_t>(all.begin(), all.end()).size() == 13);
  for (const char* bad : {"0/3", "4/3", "a/b", "3", "1/0", "-1/2"}) CHECK_THROWS_AS(parse_shard(bad), SweepError);
  CHECK(default_store_path("oven", Shard{2, 4}) == "results/oven.sweep.shard-2-of-4.sqlite");
  CHECK(default_store_path("oven", Shard{}) == "results/oven.sweep.sqlite");
}

TEST_CASE("the spec hash is 64-bit FNV-1a", "[sweep]") {
  // Test vectors of the FNV reference (Fowler, Noll, Vo), recalled from memory and recomputed
  // independently in Python while writing this test.
  CHECK(fnv1a64_hex("") == "cbf29ce484222325");
  CHECK(fnv1a64_hex("a") == "af63dc4c8601ec8c");
  CHECK(fnv1a64_hex("foobar") == "85944171f73967e8");
}

TEST_CASE("point texts set the varied keys; poles are indexed as written", "[sweep]") {
  const auto path = temp_spec("points", kSpec);
  const SweepSpec spec(path);
  SweepGrid g;
  g.axes.push_back(parse_sweep_axis("plant.poles[1][0]=-5,-6"));   // real part of the pair
  g.axes.push_back(parse_sweep_axis("plant.poles[0]=-2,-3"));      // a real pole
  g.axes.push_back(parse_sweep_axis("requirements.settling_time_max=2.5"));  // an integer in the file
  g.axes.push_back(parse_sweep_axis("search.max_evaluations=150"));          // stays an integer
  spec.check_keys(g);
  const Spec p = parse_spec(spec.point_text(g, 2), path);  // (−6, −2, 2.5, 150)
  std::vector<std::complex<double>> poles = p.plant.poles;
  CHECK(std::count(poles.begin(), poles.end(), std::complex<double>(-6.0, 3.0)) == 1);
  CHECK(std::count(poles.begin(), poles.end(), std::complex<double>(-6.0, -3.0)) == 1);
  CHECK(std::count(poles.begin(), poles.end(), std::complex<double>(-2.0, 0.0)) == 1);
  CHECK(*p.requirements.settling_time_max_s == 2.5);
  CHECK(p.search.max_evaluations == 150);
  CHECK(p.name == Spec(parse_spec(kSpec, path)).name);
  // Values round-trip exactly through the re-written text.
  SweepGrid fine;
  fine.axes.push_back(parse_sweep_axis("requirements.overshoot_max_pct=0.1:9.7:7"));
  for (std::size_t i = 0; i < fine.size(); ++i)
    CHECK(*parse_spec(spec.point_text(fine, i), path).requirements.overshoot_max_pct == fine.point(i)[0]);
}

TEST_CASE("keys that are missing, not numbers or out of range are refused", "[sweep]") {
  const auto path = temp_spec("keys", kSpec);
  const SweepSpec spec(path);
  auto message = [&](const char* axis) {
    SweepGrid g;
    g.axes.push_back(parse_sweep_axis(axis));
    try {
      spec.check_keys(g);
    } catch (const SweepError& e) {
      return std::string(e.what());
    }
    return std::string("(accepted)");
  };
  CHECK_THAT(message("requirements.effort_max=1,2"), Catch::Contains("'requirements.effort_max' is not in the spec file"));
  CHECK_THAT(message("plant.poles=1,2"), Catch::Contains("expected a numeric spec key (it is an array"));
  CHECK_THAT(message("plant.poles[1]=1,2"), Catch::Contains("[i][0] is its real part"));
  CHECK_THAT(message("plant.poles[3]=1,2"), Catch::Contains("index 3 is out of range"));
  CHECK_THAT(message("controller.structure=1,2"), Catch::Contains("(it is a string)"));
  CHECK_THAT(message("plant.gain[0]=1,2"), Catch::Contains("'plant.gain' is not an array"));
  CHECK(message("plant.delay=0,0.1") == "(accepted)");
}

TEST_CASE("[sweep] vary in a spec is read and its syntax checked with the line", "[sweep][spec]") {
  const std::string ok = std::string(kSpec) + "[sweep]\nvary = [\"plant.delay=0:0.1:3\", \"plant.gain=1,2\"]\n";
  CHECK(parse_spec(ok, "s.toml").sweep_vary == std::vector<std::string>{"plant.delay=0:0.1:3", "plant.gain=1,2"});
  const std::string bad = std::string(kSpec) + "[sweep]\nvary = [\"plant.delay=0:0.1:0\"]\n";
  CHECK_THROWS_WITH(parse_spec(bad, "s.toml"), Catch::StartsWith("s.toml:14:") && Catch::Contains("sweep.vary[0]") &&
                                                    Catch::Contains("COUNT '0'"));
  CHECK_THROWS_WITH(parse_spec(std::string(kSpec) + "[sweep]\nvary = 3\n", "s.toml"),
                    Catch::Contains("sweep.vary: expected a non-empty array of strings"));
  CHECK_THROWS_WITH(parse_spec(std::string(kSpec) + "[sweep]\nvary = [\"x=1\"]\nstore = \"a\"\n", "s.toml"),
                    Catch::Contains("unknown key"));
}

namespace {

/// The definition, applied to every pair: p is kept unless some q is ≤ everywhere and < somewhere.
std::vector<std::size_t> brute_force_front(const std::vector<std::vector<double>>& pts) {
  std::vector<std::size_t> out;
  for (std::size_t i = 0; i < pts.size(); ++i) {
    bool dominated = false;
    for (std::size_t j = 0; j < pts.size() && !dominated; ++j) {
      bool all_le = true, some_lt = false;
      for (std::size_t d = 0; d < pts[i].size(); ++d) {
        all_le = all_le && pts[j][d] <= pts[i][d];
        some_lt = some_lt || pts[j][d] < pts[i][d];
      }
      dominated = all_le && some_lt;
    }
    if (!dominated) out.push_back(i);
  }
  return out;
}

}  // namespace

TEST_CASE("non-dominated points: a hand example", "[sweep][pareto]") {
  // (peak time, effort): (1, 5) (2, 3) (3, 4) (4, 1) (2, 3) (5, 5); (3, 4) is beaten by (2, 3),
  // (5, 5) by all; the duplicate (2, 3) stays twice.
  const std::vector<std::vector<double>> p{{1, 5}, {2, 3}, {3, 4}, {4, 1}, {2, 3}, {5, 5}};
  CHECK(non_dominated(p) == std::vector<std::size_t>{0, 1, 3, 4});
  CHECK(non_dominated({}).empty());
  CHECK_THROWS_AS(non_dominated({{1, 2}, {1}}), std::invalid_argument);
  CHECK_THROWS_AS(non_dominated({{1, std::nan("")}}), std::invalid_argument);
}

TEST_CASE("non-dominated points agree with a brute-force check on random points", "[sweep][pareto]") {
  std::mt19937_64 rng(12345);
  for (int trial = 0; trial < 200; ++trial) {
    const std::size_t k = 2 + static_cast<std::size_t>(trial % 3);       // 2, 3, 4 objectives
    const std::size_t n = 1 + static_cast<std::size_t>(rng() % 120);
    const bool coarse = trial % 2 == 0;  // small integers: many ties and duplicates
    std::vector<std::vector<double>> pts(n, std::vector<double>(k));
    for (auto& p : pts)
      for (auto& v : p)
        v = coarse ? static_cast<double>(rng() % 6) : std::uniform_real_distribution<double>(-1.0, 1.0)(rng);
    INFO("trial " << trial << ", " << n << " points, " << k << " objectives");
    REQUIRE(non_dominated(pts) == brute_force_front(pts));
  }
}

// The outline of flagged map cells, against counting: a set of F unit squares with A edge-adjacent
// pairs inside it has a boundary of 4F − 2A unit edges (each shared edge removes two), and a
// boundary made of closed curves meets every vertex an even number of times (Euler's
// handshake argument for closed walks).
TEST_CASE("outline of flagged map cells: edge count and closed curves", "[sweep][report]") {
  std::mt19937_64 rng(777);
  for (int trial = 0; trial < 300; ++trial) {
    const std::size_t nx = 1 + rng() % 9, ny = 1 + rng() % 9;
    std::vector<bool> flagged(nx * ny);
    const unsigned density = 1 + static_cast<unsigned>(rng() % 4);  // 25 … 100 % of the cells
    for (std::size_t k = 0; k < flagged.size(); ++k) flagged[k] = (rng() % 4) < density;
    std::size_t f = 0, adjacent = 0;
    for (std::size_t j = 0; j < ny; ++j)
      for (std::size_t i = 0; i < nx; ++i) {
        if (!flagged[j * nx + i]) continue;
        ++f;
        if (i + 1 < nx && flagged[j * nx + i + 1]) ++adjacent;
        if (j + 1 < ny && flagged[(j + 1) * nx + i]) ++adjacent;
      }
    const auto segments = outline_cells(flagged, nx, ny);
    INFO("trial " << trial << ": " << nx << " x " << ny << ", " << f << " flagged");
    REQUIRE(segments.size() == 4 * f - 2 * adjacent);
    std::map<std::pair<long, long>, int> degree;  // vertices at half-integers, doubled to integers
    std::set<std::tuple<long, long, long, long>> unique;
    for (const auto& s : segments) {
      REQUIRE(std::abs(std::abs(s.x1 - s.x0) + std::abs(s.y1 - s.y0) - 1.0) < 1e-12);  // unit, axis-parallel
      const long a = std::lround(2 * s.x0), b = std::lround(2 * s.y0), c = std::lround(2 * s.x1), d = std::lround(2 * s.y1);
      REQUIRE(unique.insert({a, b, c, d}).second);
      ++degree[{a, b}];
      ++degree[{c, d}];
    }
    for (const auto& [vertex, n] : degree) REQUIRE(n % 2 == 0);
  }
  // The whole grid flagged: its frame, 2(nx + ny) edges.
  CHECK(outline_cells(std::vector<bool>(12, true), 4, 3).size() == 14);
  CHECK(outline_cells(std::vector<bool>(12, false), 4, 3).empty());
  CHECK_THROWS_AS(outline_cells(std::vector<bool>(5, true), 2, 2), std::invalid_argument);
}

TEST_CASE("the sweep report's default folder sits beside the store", "[sweep][report]") {
  CHECK(default_sweep_report_dir("results/oven.sweep.sqlite") == std::filesystem::path("results/oven.sweep-report"));
  CHECK(default_sweep_report_dir("a.db") == std::filesystem::path("a.db-report"));
}
