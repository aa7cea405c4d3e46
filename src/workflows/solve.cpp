#include <sys/stat.h>

#include <algorithm>
#include <cstdio>
#include <filesystem>

#include "gridlu/accuracy.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/io.hpp"
#include "gridlu/lu.hpp"
#include "gridlu/version.hpp"
#include "workflows/staged_output.hpp"
#include "workflows/timing.hpp"
#include "workflows/workflows.hpp"

namespace gridlu::workflows {
namespace {

constexpr std::int64_t format_version = 1;

// Identity of the input A: where it came from and a checksum of its content.
struct fingerprint {
  std::string path;
  std::int64_t size = 0;
  double mtime = 0;
  std::uint64_t checksum = 0;
};

fingerprint stat_file(const std::string& path) {
  struct stat st{};
  stat(path.c_str(), &st);
  return {std::filesystem::absolute(path).string(), static_cast<std::int64_t>(st.st_size),
          static_cast<double>(st.st_mtim.tv_sec) + 1e-9 * static_cast<double>(st.st_mtim.tv_nsec),
          0};
}

std::string hex(std::uint64_t v) {
  char text[19];
  std::snprintf(text, sizeof text, "0x%016llx", static_cast<unsigned long long>(v));
  return text;
}

std::string entry_name(const std::string& dataset, std::pair<index_t, index_t> at, bool one_d) {
  return dataset + "[" + std::to_string(at.first) + (one_d ? "" : ", " + std::to_string(at.second)) +
         "]";
}

template <scalar T>
void refuse_nonfinite(const dist_matrix<T>& m, const std::string& dataset, const std::string& path,
                      bool one_d, bool transposed) {
  if (auto at = first_nonfinite(m)) {
    // Name the entry as the file's reader sees it.
    if (transposed) std::swap(at->first, at->second);
    throw error(exit_code::input, entry_name(dataset, *at, one_d) + " in " + path +
                                      " is not a finite number (NaN or Inf)");
  }
}

std::string text_attribute(const io::file& f, const std::string& key) {
  const auto a = f.get_attribute("/", key);
  const auto* s = a ? std::get_if<std::string>(&*a) : nullptr;
  return s ? *s : std::string();
}
double number_attribute(const io::file& f, const std::string& key) {
  const auto a = f.get_attribute("/", key);
  if (!a) return -1;
  if (const auto* i = std::get_if<std::int64_t>(&*a)) return static_cast<double>(*i);
  if (const auto* d = std::get_if<double>(&*a)) return *d;
  return -1;
}

template <scalar T>
solve_result solve_typed(const process_grid& grid, const solve_options& o, const io::file& input,
                         const io::file& rhs_file, index_t n, const io::dataset_shape& b_shape,
                         staged_output& out, staged_output* factors_out) {
  const double start = comm::wtime();
  solve_result r;
  r.n = n;
  r.type = std::string(scalar_traits<T>::name);
  const bool rhs_1d = b_shape.dims.size() == 1;
  r.nrhs = rhs_1d ? 1 : b_shape.dims[1];
  r.threshold = 10.0 * static_cast<double>(n) * epsilon<T>();
  fingerprint source = stat_file(o.input);

  dist_matrix<T> a(grid, n, n, o.block);
  dist_matrix<T> b(grid, n, r.nrhs, o.block);
  lu_result lu;

  std::optional<io::file> saved;
  if (!o.factors.empty()) {
    // Saved factors: they must be gridlu's, of this order and type, made from this A.
    saved.emplace(grid, o.factors, io::file::mode::read);
    if (text_attribute(*saved, "gridlu_kind") != "factors")
      throw error(exit_code::input, o.factors + " is not a gridlu factors file");
    if (number_attribute(*saved, "n") != static_cast<double>(n) ||
        text_attribute(*saved, "type") != r.type)
      throw error(exit_code::input, "the factors in " + o.factors + " are not of a " +
                                        std::to_string(n) + " x " + std::to_string(n) + " " +
                                        r.type + " matrix like " + o.input);
    if (number_attribute(*saved, "source_size") != static_cast<double>(source.size))
      throw error(exit_code::input, "the factors in " + o.factors + " were made from another A (" +
                                        o.input + " has a different size)");
    r.refactored = false;
  }

  r.read_seconds = timed(grid, [&] {
    if (saved) {
      saved->read("LU", a);
      lu.pivots = saved->read_indices("pivots");
      bool valid = static_cast<index_t>(lu.pivots.size()) == n;
      for (index_t i = 0; valid && i < n; ++i) valid = lu.pivots[i] >= i && lu.pivots[i] < n;
      if (!valid) throw error(exit_code::input, "the pivots in " + o.factors + " are damaged");
    } else {
      input.read(o.matrix_dataset, a, o.column_major);
      refuse_nonfinite(a, o.matrix_dataset, o.input, false, o.column_major);
    }
    rhs_file.read(o.rhs_dataset, b, false);
    refuse_nonfinite(b, o.rhs_dataset, rhs_file.path(), rhs_1d, false);
  });
  if (!saved) {
    source.checksum = content_checksum(a);
    const double total = lu_flops<T>(static_cast<double>(n));
    const double factor_start = comm::wtime();
    lu_options lo;
    if (o.progress)
      lo.on_step = [&](index_t done) {
        const double fraction = 1.0 - lu_flops<T>(static_cast<double>(n - done)) / total;
        const double seconds = comm::wtime() - factor_start;
        o.progress(fraction, seconds, seconds > 0 ? fraction * total / seconds * 1e-9 : 0.0);
      };
    r.factor_seconds = timed(grid, [&] { lu = factor(a, lo); });
    r.gflops = total / r.factor_seconds * 1e-9;
    if (lu.first_zero_pivot >= 0)
      throw error(exit_code::singular,
                  "A is exactly singular: the pivot of column " + std::to_string(lu.first_zero_pivot) +
                      " (0-based) is zero; no solution written");
    if (factors_out) {
      r.write_seconds += timed(grid, [&] {
        io::file f(grid, factors_out->temporary(), io::file::mode::create);
        f.write("LU", a);
        f.write_indices("pivots", lu.pivots);
        const std::pair<const char*, io::attribute> attrs[] = {
            {"gridlu_kind", std::string("factors")},
            {"gridlu_format", format_version},
            {"gridlu_version", std::string(version)},
            {"type", r.type},
            {"n", std::int64_t{n}},
            {"source_file", source.path},
            {"source_size", source.size},
            {"source_mtime", source.mtime},
            {"source_checksum", hex(source.checksum)},
            {"matrix_dataset", o.matrix_dataset},
            {"column_major", std::int64_t{o.column_major}}};
        for (const auto& [key, value] : attrs) f.set_attribute("/", key, value);
        f.close();
        factors_out->commit();
      });
    }
  }

  dist_matrix<T> x(grid, n, r.nrhs, o.block);
  std::copy_n(b.data(), b.ld() * b.local_cols(), x.data());
  r.solve_seconds = timed(grid, [&] { solve(a, lu.pivots, x); });

  // The factors overwrote A: read it again into the same storage for the residual.
  r.check_seconds = timed(grid, [&] {
    input.read(o.matrix_dataset, a, o.column_major);
    if (saved) {
      refuse_nonfinite(a, o.matrix_dataset, o.input, false, o.column_major);
      if (text_attribute(*saved, "source_checksum") != hex(content_checksum(a)))
        throw error(exit_code::input, "the factors in " + o.factors + " do not belong to " +
                                          o.input + ": its matrix differs from theirs");
    }
    r.backward_errors = backward_errors(a, x, b);
  });

  r.write_seconds += timed(grid, [&] {
    io::file f(grid, out.temporary(), io::file::mode::create);
    f.write("X", x, rhs_1d);
    const double worst = *std::max_element(r.backward_errors.begin(), r.backward_errors.end());
    const std::pair<const char*, io::attribute> file_attrs[] = {
        {"gridlu_kind", std::string("solution")},
        {"gridlu_format", format_version},
        {"gridlu_version", std::string(version)},
        {"source_file", source.path}};
    for (const auto& [key, value] : file_attrs) f.set_attribute("/", key, value);
    const std::pair<const char*, io::attribute> x_attrs[] = {
        {"backward_error", worst},
        {"backward_errors", r.backward_errors},
        {"factor_seconds", r.factor_seconds},
        {"gflops", r.gflops},
        {"grid", std::to_string(grid.prows()) + "x" + std::to_string(grid.pcols())},
        {"block", std::int64_t{o.block}},
        {"ranks", std::int64_t{grid.size()}},
        {"type", r.type}};
    for (const auto& [key, value] : x_attrs) f.set_attribute("/X", key, value);
    f.close();
    out.commit();
  });
  r.total_seconds = comm::wtime() - start;
  return r;
}

// Shape checks of a dataset that must hold numbers gridlu can solve with.
void require_numbers(const io::dataset_shape& s, const std::string& name, const std::string& path) {
  if (!s.usable)
    throw error(exit_code::input, name + " in " + path + " holds " + s.type +
                                      "; gridlu reads float32, float64 and complex (compound of "
                                      "floats named r and i)");
}

}  // namespace

solve_result solve_file(const process_grid& grid, const solve_options& o) {
  if (o.block < 1) throw error(exit_code::usage, "the block size must be at least 1");
  if (!o.factors.empty() && !o.save_factors.empty())
    throw error(exit_code::usage, "--factors and --save-factors do not go together");
  staged_output out(grid, o.output, o.force);
  std::optional<staged_output> factors_out;
  if (!o.save_factors.empty()) factors_out.emplace(grid, o.save_factors, o.force);

  const io::file input(grid, o.input, io::file::mode::read);
  std::optional<io::file> other;
  if (!o.rhs_file.empty()) other.emplace(grid, o.rhs_file, io::file::mode::read);
  const io::file& rhs = other ? *other : input;

  const auto a_shape = input.shape(o.matrix_dataset);
  const std::string a_name = o.matrix_dataset + " in " + o.input;
  if (a_shape.dims.size() != 2)
    throw error(exit_code::input, a_name + " has " + std::to_string(a_shape.dims.size()) +
                                      " dimensions; the matrix must be 2-D");
  if (a_shape.dims[0] != a_shape.dims[1])
    throw error(exit_code::input, a_name + " is " + std::to_string(a_shape.dims[0]) + " x " +
                                      std::to_string(a_shape.dims[1]) + "; the matrix must be square");
  if (a_shape.dims[0] < 1) throw error(exit_code::input, a_name + " is empty");
  require_numbers(a_shape, o.matrix_dataset, o.input);
  const index_t n = a_shape.dims[0];

  const auto b_shape = rhs.shape(o.rhs_dataset);
  const std::string b_name = o.rhs_dataset + " in " + rhs.path();
  require_numbers(b_shape, o.rhs_dataset, rhs.path());
  if (b_shape.dims.empty() || b_shape.dims.size() > 2 || b_shape.dims[0] != n)
    throw error(exit_code::input, b_name + " must have " + std::to_string(n) +
                                      " rows (A is " + std::to_string(n) + " x " +
                                      std::to_string(n) + ") and one or two dimensions");
  if (b_shape.dims.size() == 2 && b_shape.dims[1] < 1)
    throw error(exit_code::input, b_name + " has no columns");
  if (b_shape.is_complex && !a_shape.is_complex)
    throw error(exit_code::input, b_name + " is complex but A is real");

  solve_result result;
  dispatch_scalar(a_shape.type, [&]<class T>(T) {
    result = solve_typed<T>(grid, o, input, rhs, n, b_shape, out,
                            factors_out ? &*factors_out : nullptr);
  });
  return result;
}

void generate_file(const process_grid& grid, const generate_options& o) {
  if (o.n < 1) throw error(exit_code::usage, "--n must be at least 1");
  if (o.nrhs < 1) throw error(exit_code::usage, "--rhs must be at least 1");
  staged_output out(grid, o.output, o.force);
  const bool known = dispatch_scalar(o.type, [&]<class T>(T) {
    dist_matrix<T> a(grid, o.n, o.n, default_block), b(grid, o.n, o.nrhs, default_block);
    a.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed, i, j); });
    b.fill([&](index_t i, index_t j) { return random_entry<T>(o.seed + 1, i, j); });
    io::file f(grid, out.temporary(), io::file::mode::create);
    f.write("A", a);
    f.write("B", b);
    const std::pair<const char*, io::attribute> attrs[] = {
        {"gridlu_kind", std::string("system")},
        {"gridlu_format", format_version},
        {"gridlu_version", std::string(version)},
        {"generator", std::string("random")},
        {"seed", static_cast<std::int64_t>(o.seed)},
        {"n", std::int64_t{o.n}},
        {"nrhs", std::int64_t{o.nrhs}},
        {"type", o.type}};
    for (const auto& [key, value] : attrs) f.set_attribute("/", key, value);
    f.close();
    out.commit();
  });
  if (!known)
    throw error(exit_code::usage, "unknown element type '" + o.type +
                                      "' (float32, float64, complex64 or complex128)");
}

}  // namespace gridlu::workflows
