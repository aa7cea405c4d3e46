#include "workflows/model.hpp"

#include <algorithm>
#include <cmath>

#include "gridlu/error.hpp"
#include "workflows/dispatch.hpp"

namespace gridlu::workflows {
namespace {

// The distinct values of one coordinate of the samples, sorted.
template <class F>
std::vector<double> axis(const std::vector<rate_sample>& s, F coordinate) {
  std::vector<double> v;
  for (const auto& x : s) v.push_back(static_cast<double>(coordinate(x)));
  std::sort(v.begin(), v.end());
  v.erase(std::unique(v.begin(), v.end()), v.end());
  return v;
}

// The bracketing pair of `x` on `v` and the weight of the upper one, in log(x).
struct bracket {
  std::size_t low = 0, high = 0;
  double weight = 0;
};
bracket bracket_of(const std::vector<double>& v, double x) {
  const auto up = std::lower_bound(v.begin(), v.end(), x);
  if (up == v.begin()) return {};
  if (up == v.end()) return {v.size() - 1, v.size() - 1, 0};
  const std::size_t h = static_cast<std::size_t>(up - v.begin());
  return {h - 1, h, std::log(x / v[h - 1]) / std::log(v[h] / v[h - 1])};
}

double ceil_log2(int p) { return p > 1 ? std::ceil(std::log2(p)) : 0.0; }

nlohmann::json link_json(const link_cost& l) {
  return {{"latency_seconds", l.latency}, {"bandwidth_bytes_per_second", l.bandwidth}};
}
link_cost link_from(const nlohmann::json& j) {
  return {j.at("latency_seconds").get<double>(), j.at("bandwidth_bytes_per_second").get<double>()};
}

nlohmann::json table_json(const rate_table& t) {
  auto j = nlohmann::json::array();
  for (const auto& s : t.samples()) j.push_back({s.rows, s.k, s.gflops});
  return j;
}
nlohmann::json column_json(const column_factors& f) {
  return {{"panel", f.panel},
          {"pivot_search", f.pivot_search},
          {"interchange", f.interchange},
          {"broadcast", f.broadcast}};
}
// A measured factor: finite and above 0.
double factor_from(const nlohmann::json& j, const char* key) {
  const double x = j.at(key).get<double>();
  if (!(x > 0 && std::isfinite(x)))
    throw error(error_kind::input, std::string(key) + " must be finite and above 0");
  return x;
}
column_factors column_from(const nlohmann::json& j) {
  return {factor_from(j, "panel"), factor_from(j, "pivot_search"), factor_from(j, "interchange"),
          factor_from(j, "broadcast")};
}

rate_table table_from(const nlohmann::json& j) {
  std::vector<rate_sample> samples;
  for (const auto& s : j) {
    samples.push_back({s.at(0).get<index_t>(), s.at(1).get<index_t>(), s.at(2).get<double>()});
    if (samples.back().rows < 1 || samples.back().k < 1 || !(samples.back().gflops > 0))
      throw error(error_kind::input, "a rate sample needs rows, k and a rate above 0");
  }
  if (samples.empty()) throw error(error_kind::input, "a rate table without samples");
  return rate_table(std::move(samples));
}

}  // namespace

rate_table::rate_table(std::vector<rate_sample> samples) : samples_(std::move(samples)) {
  rows_ = axis(samples_, [](const rate_sample& s) { return s.rows; });
  ks_ = axis(samples_, [](const rate_sample& s) { return s.k; });
  // The sample nearest to each point of the axes (those of `calibrate` fill them all).
  for (const double r : rows_)
    for (const double k : ks_) {
      const auto d = [&](const rate_sample& s) {
        return std::abs(std::log(s.rows / r)) + std::abs(std::log(s.k / k));
      };
      grid_.push_back(std::min_element(samples_.begin(), samples_.end(), [&](auto& x, auto& y) {
                        return d(x) < d(y);
                      })->gflops);
    }
}

double rate_table::gflops_at(double rows, double k) const {
  const auto at = [&](std::size_t i, std::size_t j) { return grid_[i * ks_.size() + j]; };
  const bracket r = bracket_of(rows_, rows), c = bracket_of(ks_, k);
  const double low = (1 - c.weight) * at(r.low, c.low) + c.weight * at(r.low, c.high);
  const double high = (1 - c.weight) * at(r.high, c.low) + c.weight * at(r.high, c.high);
  return (1 - r.weight) * low + r.weight * high;
}

double rate_table::best() const {
  return grid_.empty() ? 0.0 : *std::max_element(grid_.begin(), grid_.end());
}

const kernel_rates& calibration::rates(const std::string& type) const {
  for (const auto& [name, r] : types)
    if (name == type) return r;
  throw error(error_kind::usage, "the calibration (" + source + ") has no rates for " + type +
                                     ": run gridlu calibrate --type " + type);
}

nlohmann::json calibration::json() const {
  nlohmann::json t;
  for (const auto& [name, r] : types)
    t[name] = {{"gemm", table_json(r.gemm)},
               {"trsm", table_json(r.trsm)},
               {"panel", table_json(r.panel)},
               {"swap_seconds_per_entry", r.swap_seconds},
               {"gemm_in_factorization", r.gemm_in_factorization},
               {"process_column", column_json(r.column)}};
  return {{"format", format},
          {"source", source},
          {"ranks", ranks},
          {"point_to_point", link_json(point_to_point)},
          {"row_broadcast", link_json(row_broadcast)},
          {"column_broadcast", link_json(column_broadcast)},
          {"checkpoint_write_bytes_per_second", write_bandwidth},
          {"types", t}};
}

calibration calibration::from_json(const nlohmann::json& j) {
  try {
    if (j.at("format") != format)
      throw error(error_kind::input, "a calibration of format " + j.at("format").dump() +
                                         ", not \"" + format + "\": run gridlu calibrate again");
    calibration c;
    c.source = j.at("source").get<std::string>();
    c.ranks = j.at("ranks").get<int>();
    c.point_to_point = link_from(j.at("point_to_point"));
    c.row_broadcast = link_from(j.at("row_broadcast"));
    c.column_broadcast = link_from(j.at("column_broadcast"));
    c.write_bandwidth = j.at("checkpoint_write_bytes_per_second").get<double>();
    for (const auto& [name, t] : j.at("types").items())
      c.types.push_back(
          {name,
           {table_from(t.at("gemm")), table_from(t.at("trsm")), table_from(t.at("panel")),
            t.at("swap_seconds_per_entry").get<double>(), factor_from(t, "gemm_in_factorization"),
            column_from(t.at("process_column"))}});
    return c;
  } catch (const nlohmann::json::exception& e) {
    throw error(error_kind::input, std::string("a malformed calibration: ") + e.what());
  }
}

double prediction::remaining(index_t done) const {
  if (elapsed.empty()) return 0;
  const auto step = std::upper_bound(columns.begin(), columns.end(), static_cast<double>(done));
  const double before = step == columns.begin() ? 0.0 : elapsed[step - columns.begin() - 1];
  return seconds - before;
}

namespace {

// One panel step's costs on a typical rank, in seconds.
struct step_cost {
  double panel = 0, search = 0, row_broadcast = 0;            // the panel's chain
  double interchange = 0, broadcast = 0, trsm = 0, gemm = 0;  // the update
  double update() const { return interchange + broadcast + trsm + gemm; }
};

class step_model {
public:
  step_model(const calibration& c, const model_case& m)
      : c_(c),
        r_(c.rates(m.type)),
        m_(m),
        p_(m.grid.p),
        q_(m.grid.q),
        e_(element_bytes(m.type)),
        f_(by_type<double>(
            m.type, [](auto z) { return scalar_traits<decltype(z)>::is_complex ? 4.0 : 1.0; })) {}

  // The step factoring columns [j0, j0 + jb).
  step_cost at(double j0, double jb) const {
    const double n = static_cast<double>(m_.n), h = n - j0, t = h - jb;
    step_cost s;
    s.panel = f_ * (h * jb * jb - jb * jb * jb / 3) / p_ / rate(r_.panel, h / p_, jb);
    if (p_ > 1) panel_messages(s, jb);
    s.row_broadcast = ceil_log2(q_) * c_.row_broadcast.seconds(h / p_ * jb * e_);
    // The rank holding the step's block row moves all of its jb rows and the pivot rows
    // coming in, over the local columns still to update; with more process rows, half of
    // them travel as messages. The finished columns' interchanges are held back and done
    // in one pass with each column in cache (or while waiting for a panel): not counted.
    const double moved = 2 * jb * (h / q_);
    s.interchange = moved * r_.swap_seconds;
    if (p_ > 1)
      s.interchange +=
          (p_ - 1) * c_.column_broadcast.latency + moved / 2 * e_ / c_.column_broadcast.bandwidth;
    s.trsm = f_ * jb * jb * (t / q_) / p_ / rate(r_.trsm, 2048, jb);
    if (p_ > 1) {
      s.broadcast = 2 * (ceil_log2(p_) * c_.column_broadcast.latency +
                         jb * (t / q_) * e_ * (p_ - 1) / p_ / c_.column_broadcast.bandwidth);
      apply_column_factors(s);
    }
    // GEMM's rate follows the smaller of the local block's sides; inside a factorization
    // it cannot beat its rate alone (a share above 1 is a calibration's noise).
    s.gemm = f_ * 2 * (t / p_) * (t / q_) * jb / rate(r_.gemm, std::min(t / p_, t / q_), jb) /
             std::min(1.0, r_.gemm_in_factorization);
    return s;
  }

  double best_gemm() const { return r_.gemm.best(); }

private:
  static double rate(const rate_table& t, double rows, double k) {
    return 1e9 * t.gflops_at(std::max(rows, 1.0), std::max(k, 1.0));
  }

  // A panel over more than one process row: a reduction per column carrying two rows of
  // up to 16 entries, and at each level of the recursion a broadcast of a U piece and
  // the interchanges of the other half.
  void panel_messages(step_cost& s, double jb) const {
    const link_cost& col = c_.column_broadcast;
    s.search = jb * 2 * ceil_log2(p_) * col.seconds(2 * 16 * e_ + 16);  // reduce, then share
    const double levels = std::max(0.0, std::ceil(std::log2(jb / 16)));
    s.panel += s.search + levels * ceil_log2(p_) * col.seconds(jb * jb / 4 * e_) +
               (jb / 16) * 2 * col.latency + ceil_log2(p_) * col.seconds(jb * jb * e_);
  }

  void apply_column_factors(step_cost& s) const {
    const column_factors& f = r_.column;
    s.panel *= f.panel;
    s.search *= f.pivot_search;
    s.interchange *= f.interchange;
    s.broadcast *= f.broadcast;
  }

  const calibration& c_;
  const kernel_rates& r_;
  const model_case& m_;
  const double p_, q_, e_, f_;
};

}  // namespace

prediction predict(const calibration& c, const model_case& m) {
  if (m.n < 1 || m.block < 1 || m.grid.p < 1 || m.grid.q < 1)
    throw error(error_kind::usage, "the model needs an order, a block and a grid above 0");
  if (m.n > model_order_limit)
    throw error(error_kind::usage, "the model covers orders up to " +
                                       std::to_string(model_order_limit) + ", not " +
                                       std::to_string(m.n));
  const step_model model(c, m);
  const bool overlap = m.lookahead > 0 && m.grid.q > 1;
  prediction out;
  for (index_t j0 = 0; j0 < m.n; j0 += m.block) {
    const double jb = static_cast<double>(std::min(m.block, m.n - j0));
    const step_cost s = model.at(static_cast<double>(j0), jb);
    const double chain = s.panel + s.row_broadcast;
    // With a panel ahead, a process column factors one panel in Q while the others
    // update; the chain of panels is the floor.
    const double step =
        overlap ? std::max(s.update() + s.panel / m.grid.q, chain) : s.update() + chain;
    const double share = overlap ? 1.0 / m.grid.q : 1.0;
    out.phases.panel += s.panel * share;
    out.phases.pivot_search += s.search * share;
    out.phases.interchange += s.interchange;
    out.phases.broadcast += s.broadcast;
    out.phases.trsm += s.trsm;
    out.phases.gemm += s.gemm;
    out.seconds += step;
    out.columns.push_back(static_cast<double>(j0) + jb);
    out.elapsed.push_back(out.seconds);
  }
  const auto& p = out.phases;
  out.phases.wait =
      std::max(0.0, out.seconds - (p.panel + p.interchange + p.broadcast + p.trsm + p.gemm));
  const double flops = by_type<double>(
      m.type, [&](auto z) { return lu_flops<decltype(z)>(static_cast<double>(m.n)); });
  out.gflops = flops / out.seconds * 1e-9;
  out.efficiency = out.gflops / (model.best_gemm() * m.grid.p * m.grid.q);
  return out;
}

}  // namespace gridlu::workflows
