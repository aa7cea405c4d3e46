// Each result's figures as the JSON of a report; the command line adds the grid and the
// versions every report carries.
#include <algorithm>
#include <cmath>

#include "workflows/calibrate.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

nlohmann::json phases_json(const lu_phases& p) {
  return {{"panel", p.panel},
          {"pivot_search", p.pivot_search},
          {"interchange", p.interchange},
          {"broadcast", p.broadcast},
          {"trsm", p.trsm},
          {"gemm", p.gemm},
          {"wait", p.wait}};
}

// The trust figures under the same keys in every report. JSON has no infinity or NaN:
// those are written as null.
nlohmann::json trust_json(const trust_report& t) {
  return {{"unit_roundoff", t.unit_roundoff},
          {"entry_error", t.entry_error},
          {"normwise_backward_error", t.worst_normwise()},
          {"normwise_backward_errors", t.backward.normwise},
          {"componentwise_backward_error", t.worst_componentwise()},
          {"componentwise_backward_errors", t.backward.componentwise},
          {"condition_estimate", t.condition_1},
          {"condition_estimate_inf", t.condition_inf},
          {"forward_error_bound", t.worst_forward_bound()},
          {"forward_error_bounds", t.forward_bounds},
          {"growth_factor", t.growth},
          {"smallest_pivot", t.smallest_pivot},
          {"trusted_digits", t.trusted_digits},
          {"flags", t.flags},
          {"flag_reasons", t.reasons}};
}

}  // namespace

nlohmann::json precision_json(const precision_outcome& p,
                              const std::optional<refinement>& refined) {
  nlohmann::json j = {{"precision", p.asked}, {"precision_used", p.used}, {"fallback", p.fallback}};
  if (p.single_factor_seconds > 0) j["single_factor_seconds"] = p.single_factor_seconds;
  if (p.mixed) {
    j["refinement_iterations"] = p.mixed->iterations;
    j["refinement_backward_errors"] = p.mixed->normwise_backward_errors;
    j["refinement_residual_ratios"] = p.mixed->residual_ratios;
    if (p.asked == "mixed-krylov") j["refinement_inner_iterations"] = p.mixed->inner_iterations;
  } else {
    j["refinement_iterations"] = refined ? refined->iterations : 0;
    j["refinement_backward_errors"] = refined ? refined->normwise : std::vector<double>{};
  }
  return j;
}

nlohmann::json solve_result::json() const {
  nlohmann::json j = {{"command", "solve"},
                      {"job", to_json(what)},
                      {"input", what.input},
                      {"output", what.output},
                      {"n", what.n},
                      {"nrhs", what.nrhs},
                      {"type", what.type},
                      {"block", what.block},
                      {"refactored", refactored},
                      {"times",
                       {{"read", read_seconds},
                        {"factor", factor_seconds},
                        {"solve", solve_seconds},
                        {"check", check_seconds},
                        {"write", write_seconds},
                        {"total", total_seconds}}},
                      {"gflops", gflops},
                      {"phases", phases_json(phases)}};
  if (!what.checkpoint_dir.empty())
    j["checkpoint"] = {{"dir", what.checkpoint_dir},
                       {"columns_done", columns_done},
                       {"flops_done_percent", percent_of_flops(what.n, columns_done)},
                       {"factor_seconds_all_runs", factor_seconds_total},
                       {"restarts", restarts},
                       {"checkpoints", checkpoints},
                       {"budget_too_short", budget_too_short},
                       {"state_removed", state_removed}};
  if (stopped) {
    j["status"] = "stopped";
    return j;
  }
  j.update(precision_json(precision, refined));
  j.update(trust_json(trust));
  if (refined)
    j["refinement"] = {{"iterations", refined->iterations},
                       {"normwise_backward_errors", refined->normwise},
                       {"componentwise_backward_errors", refined->componentwise}};
  j["status"] = "solved";
  return j;
}

nlohmann::json bench_result::json(const bench_options& o) const {
  nlohmann::json j = {{"command", "bench"},
                      {"n", o.n},
                      {"block", block},
                      {"lookahead", o.lookahead},
                      {"type", o.type},
                      {"times",
                       {{"factor", factor_median},
                        {"factor_runs", factor_seconds},
                        {"to_solution", solve_median},
                        {"to_solution_runs", solve_seconds}}},
                      {"normwise_backward_error", normwise_backward_error},
                      {"gemm_gflops", gemm_gflops},
                      {"gemm_order", gemm_order}};
  j.update(precision_json(precision));
  if (is_mixed(o.precision)) {
    j["narrow_gemm_gflops"] = narrow_gemm_gflops;
    return j;
  }
  j["gflops"] = gflops;
  j["ratio_to_gemm"] = gflops / gemm_gflops;
  j["phases"] = phases_json(phases);
  return j;
}

nlohmann::json read_bench_result::json(const read_bench_options& o) const {
  return {{"command", "bench-read"},
          {"file", o.path},
          {"dataset", o.dataset},
          {"bytes", bytes},
          {"block", block},
          {"times", {{"read", median}, {"read_runs", seconds}}},
          {"gbytes_per_second", bytes / median * 1e-9}};
}

nlohmann::json demo_result::json(const demo_options& o) const {
  nlohmann::json j = {{"command", "demo"},
                      {"n", o.n},
                      {"nrhs", o.nrhs},
                      {"block", block},
                      {"type", o.type},
                      {"times",
                       {{"generate", generate_seconds},
                        {"factor", factor_seconds},
                        {"solve", solve_seconds},
                        {"check", check_seconds}}},
                      {"gflops", gflops},
                      {"status", "solved"}};
  j.update(precision_json(precision));
  j.update(trust_json(trust));
  return j;
}

nlohmann::json conductor_result::json(const conductor_options& o) const {
  const auto pair = [](std::complex<double> z) { return std::vector<double>{z.real(), z.imag()}; };
  nlohmann::json j = {{"command", "demo"},
                      {"problem", o.problem},
                      {"surface", surface},
                      {"kernel", kernel},
                      {"n", n},
                      {"block", block},
                      {"type", type},
                      {"times",
                       {{"assemble", assemble_seconds},
                        {"factor", factor_seconds},
                        {"solve", solve_seconds},
                        {"check", check_seconds}}},
                      {"gflops", gflops},
                      {"quantity", quantity},
                      {"computed", pair(computed)},
                      {"expected", pair(expected)},
                      {"relative_difference", std::abs(computed - expected) / std::abs(expected)},
                      {"status", "solved"}};
  if (corrections >= 0) j["corrections"] = corrections;
  j.update(trust_json(trust));
  return j;
}

nlohmann::json plan_result::json() const {
  const auto grid_json = [](grid_shape g) { return nlohmann::json::array({g.p, g.q}); };
  auto candidates_json = nlohmann::json::array();
  for (const auto& c : candidates)
    candidates_json.push_back({{"grid", grid_json(c.grid)},
                               {"block", c.block},
                               {"predicted_seconds", c.predicted.seconds},
                               {"efficiency", c.predicted.efficiency}});
  const plan_candidate& best = chosen();
  return {{"command", "plan"},
          {"n", asked.n},
          {"type", asked.type},
          {"precision", asked.precision},
          {"factored_type", factored_type},
          {"nodes", asked.nodes},
          {"cores_per_node", asked.cores_per_node},
          {"ranks", ranks},
          {"calibration", calibration_source},
          {"memory_per_rank_bytes", memory_per_rank},
          {"memory_parts_bytes",
           {{"a_share", memory.a_share},
            {"a_copies", memory.a_copies},
            {"vectors", memory.matrices - memory.a_share - memory.a_copies},
            {"panels", memory.panels},
            {"io", memory.io}}},
          {"memory_available_per_rank_bytes", asked.memory_per_node / asked.cores_per_node},
          {"fits", fits},
          {"grid", grid_json(best.grid)},
          {"block", best.block},
          {"lookahead", asked.lookahead},
          {"predicted_seconds", best.predicted.seconds},
          {"phases", phases_json(best.predicted.phases)},
          {"gflops", best.predicted.gflops},
          {"efficiency", best.predicted.efficiency},
          {"checkpoint_bytes", checkpoint_bytes},
          {"checkpoint_disk_bytes", checkpoint_disk_bytes},
          {"checkpoint_write_seconds", checkpoint_write_seconds},
          {"mtbf_hours", asked.mtbf_hours > 0 ? nlohmann::json(asked.mtbf_hours) : nullptr},
          {"checkpoint_interval_seconds",
           checkpoint_interval > 0 ? nlohmann::json(checkpoint_interval) : nullptr},
          {"expected_seconds", expected_seconds},
          {"candidates", candidates_json}};
}

}  // namespace gridlu::workflows
