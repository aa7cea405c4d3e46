// A solve job as one value: its inputs (with fingerprints), its options and its
// outputs. It is recorded in a checkpoint directory at the start of a checkpointed run,
// read back by `resume` and `info`, and copied into the report and the outputs'
// attributes — all through the one key <-> member list of for_each_field.
#pragma once

#include <cstdint>
#include <string>

#include <nlohmann/json.hpp>

#include "gridlu/io.hpp"

namespace gridlu::workflows {

struct job {
  std::string id;  // random, made when the job is first started; tags its state and marker
  // Inputs. Paths are absolute: a later run may start in another directory.
  std::string input, matrix_dataset = "A", rhs_file, rhs_dataset = "B", factors;
  bool column_major = false;     // A's dataset holds the transpose
  std::string solve_with = "A";  // the system solved: "A", "A^T" or "A^H" (times X = B)
  // What the inputs were when the job started.
  std::string type;  // A's element type, the one the system is solved in
  std::int64_t n = 0, nrhs = 0;
  std::int64_t input_size = 0, rhs_size = 0;
  double input_mtime = 0, rhs_mtime = 0;
  std::string a_checksum, b_checksum;  // io::checksum_text of content_checksum
  // Options.
  std::int64_t block = 0, lookahead = 0;
  bool force = false;               // outputs may replace existing files
  double checkpoint_every = 0;      // seconds; 0: only when stopping
  bool refine = false;              // iterative refinement of X in the working precision
  std::int64_t require_digits = 0;  // fewer trusted digits fail the run (X is still written)
  // The relative accuracy of A's entries (trust_rules::entry_error); negative: A's file
  // says, in its `entry_error` attribute, or they are exact.
  double entry_error = -1;
  // "double", or "mixed"/"mixed-krylov": single-precision factors of op(A), refined in
  // double (gridlu/mixed.hpp).
  std::string precision = "double";
  // Why mixed precision gave way to a double factorization, once it has: a later run
  // continues that one.
  std::string fallback;
  // Outputs.
  std::string output, save_factors, checkpoint_dir;
};

// Calls f(key, member) for every member, in a fixed order: the one description of the
// job's keys. Works for a const and a mutable job alike.
template <class J, class F>
void for_each_field(J& j, F&& f) {
  f("job_id", j.id);
  f("input", j.input);
  f("matrix_dataset", j.matrix_dataset);
  f("rhs_file", j.rhs_file);
  f("rhs_dataset", j.rhs_dataset);
  f("factors", j.factors);
  f("column_major", j.column_major);
  f("solve_with", j.solve_with);
  f("type", j.type);
  f("n", j.n);
  f("nrhs", j.nrhs);
  f("input_size", j.input_size);
  f("input_mtime", j.input_mtime);
  f("rhs_size", j.rhs_size);
  f("rhs_mtime", j.rhs_mtime);
  f("a_checksum", j.a_checksum);
  f("b_checksum", j.b_checksum);
  f("block", j.block);
  f("lookahead", j.lookahead);
  f("force", j.force);
  f("checkpoint_every_seconds", j.checkpoint_every);
  f("refine", j.refine);
  f("require_digits", j.require_digits);
  f("entry_error", j.entry_error);
  f("precision", j.precision);
  f("fallback", j.fallback);
  f("output", j.output);
  f("save_factors", j.save_factors);
  f("checkpoint_dir", j.checkpoint_dir);
}

// The job as JSON, and back from JSON text: every field's presence and type is checked,
// and an input error names `where` and the field.
nlohmann::json to_json(const job& j);
job job_from_json(const std::string& text, const std::string& where);

// The job's fields as attributes of an HDF5 object (booleans as 0/1).
void write_attributes(io::file& f, const std::string& object, const job& j);

// True for "mixed" and "mixed-krylov".
bool is_mixed(const std::string& precision);

// True when a completion marker's text records this job (and not another) as finished.
bool marks_completion(const std::string& marker, const job& j);

// A new random job identity (32 hex digits from the kernel's random source).
std::string new_job_id();

// The same work asked for: the same inputs read the same way, the same X.
bool same_work(const job& a, const job& b);

}  // namespace gridlu::workflows
