// Checkpoint directories: a factorization stopped part-way, saved, loaded on another grid
// and block size and continued must end where LAPACK's ?getrf (OpenBLAS, on the gathered
// original) ends, and where an uninterrupted gridlu run ends up to rounding. Around that:
// the directory's bookkeeping, its lock, and the refusal of states that do not fit or
// were altered on disk.
#include <fcntl.h>
#include <gtest/gtest.h>
#include <sys/file.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <set>
#include <string>
#include <vector>

#include "gridlu/checkpoint.hpp"
#include "gridlu/generate.hpp"
#include "gridlu/lu.hpp"
#include "kernels/blas.hpp"
#include "support.hpp"

namespace {

using namespace gridlu;
using namespace gridlu::testing_support;
namespace fs = std::filesystem;

template <class T>
class State : public ::testing::Test {};
TYPED_TEST_SUITE(State, scalar_types);

// What LAPACK's ?getrf (OpenBLAS) makes of a column-major n x n matrix: factors, and
// pivots counted from 0 like gridlu's.
template <class T>
struct lapack_result {
  std::vector<T> factors;
  std::vector<index_t> pivots;
  int info;
};
template <class T>
lapack_result<T> lapack_lu(std::vector<T> a, index_t n) {
  std::vector<std::int32_t> ipiv(static_cast<std::size_t>(n));
  const int info = blas::lapack_getrf<T>(n, n, a.data(), n, ipiv.data());
  std::vector<index_t> pivots(ipiv.begin(), ipiv.end());
  for (auto& p : pivots) --p;
  return {std::move(a), std::move(pivots), info};
}

template <class T>
double max_row_sum(const std::vector<T>& a, index_t n) {
  double best = 0;
  for (index_t i = 0; i < n; ++i) {
    double s = 0;
    for (index_t j = 0; j < n; ++j) s += std::abs(a[static_cast<std::size_t>(i + j * n)]);
    best = std::max(best, s);
  }
  return best;
}

template <class T>
double max_difference(const std::vector<T>& a, const std::vector<T>& b) {
  double d = 0;
  for (std::size_t e = 0; e < std::min(a.size(), b.size()); ++e)
    d = std::max(d, static_cast<double>(std::abs(a[e] - b[e])));
  return d;
}

// The pivots chosen so far: those of the first `count` columns.
std::vector<index_t> chosen(const std::vector<index_t>& v, index_t count) {
  return {v.begin(), v.begin() + std::min<index_t>(count, static_cast<index_t>(v.size()))};
}

// Factors a until at least `target` columns are done (look-ahead 1, so the stop may come
// one block later) and returns the settled state.
template <class T>
lu_result factor_until(dist_matrix<T>& a, index_t target) {
  lu_options o;
  o.after_step = [&](const lu_result& st) {
    return st.columns_done >= target ? step_request::stop : step_request::go_on;
  };
  return factor(a, o);
}

// Runs f, expecting a gridlu::error of `kind` on every rank.
template <class F>
void expect_error(error_kind kind, const std::string& what, F&& f) {
  try {
    f();
    ADD_FAILURE() << what << ": no error";
  } catch (const gridlu::error& e) {
    EXPECT_EQ(static_cast<int>(e.kind()), static_cast<int>(kind)) << what << ": " << e.what();
  }
}

std::string label(grid_shape a, index_t nb1, grid_shape b, index_t nb2) {
  return "grid " + std::to_string(a.p) + "x" + std::to_string(a.q) + " nb=" + std::to_string(nb1) +
         " -> grid " + std::to_string(b.p) + "x" + std::to_string(b.q) +
         " nb=" + std::to_string(nb2);
}

// The main path: stop after about a third of the columns, save, load on the next grid
// shape this run has (the same one where it has only one) with another block size,
// finish there.
TYPED_TEST(State, StoppedSavedLoadedOnAnotherGridAndFinishedMatchesLapack) {
  using T = TypeParam;
  const scratch_dir dir;
  const auto shapes = shapes_for_world();
  const index_t n = 70;
  int case_number = 0;
  for (std::size_t s = 0; s < shapes.size(); ++s)
    for (const auto& [nb1, nb2] : {std::pair<index_t, index_t>{8, 5}, {5, 16}}) {
      const std::string path = dir.file("case-" + std::to_string(case_number++));
      const process_grid first_grid(MPI_COMM_WORLD, shapes[s]);
      const process_grid second_grid(MPI_COMM_WORLD, shapes[(s + 1) % shapes.size()]);
      SCOPED_TRACE(label(shapes[s], nb1, shapes[(s + 1) % shapes.size()], nb2));
      const auto entry = [&](index_t i, index_t j) { return random_entry<T>(500 + nb1, i, j); };

      dist_matrix<T> whole_run(first_grid, n, n, nb1);
      whole_run.fill(entry);
      const auto original = whole_run.gather();
      const auto uninterrupted = factor(whole_run);
      const auto uninterrupted_factors = whole_run.gather();

      dist_matrix<T> a(first_grid, n, n, nb1);
      a.fill(entry);
      const auto stopped = factor_until(a, n / 3);
      EXPECT_TRUE(stopped.settled);
      EXPECT_GE(stopped.columns_done, n / 3);
      EXPECT_LT(stopped.columns_done, n);
      const auto stopped_work = a.gather();
      const checkpoint::progress done{stopped.columns_done, 12.5, 2, 3};
      const std::string job_id = "job-" + std::string(scalar_traits<T>::name);
      {
        const checkpoint::directory d(first_grid, path);
        EXPECT_FALSE(d.has_state());
        d.save(a, stopped, done, job_id);
        EXPECT_TRUE(d.has_state());
      }

      const checkpoint::directory d(second_grid, path);
      EXPECT_TRUE(d.has_state());
      // The summary is what was saved, read without the matrix and on another grid.
      const auto summary = d.summary();
      EXPECT_EQ(summary.job_id, job_id);
      EXPECT_EQ(summary.type, scalar_traits<T>::name);
      EXPECT_EQ(summary.n, n);
      EXPECT_EQ(summary.done.columns_done, stopped.columns_done);
      EXPECT_EQ(summary.done.elapsed_seconds, 12.5);
      EXPECT_EQ(summary.done.restarts, 2);
      EXPECT_EQ(summary.done.checkpoints, 3);

      dist_matrix<T> b(second_grid, n, n, nb2);
      auto loaded = d.load(b);
      EXPECT_EQ(loaded.columns_done, stopped.columns_done);
      EXPECT_EQ(loaded.first_zero_pivot, stopped.first_zero_pivot);
      EXPECT_TRUE(loaded.settled);
      EXPECT_EQ(chosen(loaded.pivots, loaded.columns_done),
                chosen(stopped.pivots, stopped.columns_done));
      // The working matrix comes back bit for bit, whatever the grid and block size.
      const auto loaded_work = b.gather();
      if (is_root()) {
        EXPECT_TRUE(loaded_work == stopped_work) << "the loaded working matrix differs";
      }

      lu_options o;
      o.lookahead = 2;
      const auto finished = factor(b, std::move(loaded), o);
      const auto ours = b.gather();
      EXPECT_EQ(finished.columns_done, n);
      EXPECT_EQ(finished.pivots, uninterrupted.pivots);
      if (is_root()) {
        const auto ref = lapack_lu(original, n);
        const double tolerance = n * epsilon<T>() * max_row_sum(original, n);
        EXPECT_EQ(finished.first_zero_pivot + 1, ref.info);
        EXPECT_EQ(finished.pivots, ref.pivots);
        EXPECT_LE(max_difference(ours, ref.factors), tolerance);
        EXPECT_LE(max_difference(ours, uninterrupted_factors), tolerance);
      }
    }
}

// The ends of a factorization are states too: nothing eliminated yet (no pivots at all)
// and everything eliminated (continuing does nothing). Each is saved by one run and
// loaded by the next, on another grid shape and block size.
TYPED_TEST(State, TheFirstAndLastStatesRoundTrip) {
  using T = TypeParam;
  const scratch_dir dir;
  const auto shapes = shapes_for_world();
  const process_grid first_grid(MPI_COMM_WORLD, shapes.front());
  const process_grid second_grid(MPI_COMM_WORLD, shapes.back());
  const index_t n = 29;
  const auto entry = [](index_t i, index_t j) { return random_entry<T>(29, i, j); };
  dist_matrix<T> a(first_grid, n, n, 4);
  a.fill(entry);
  const auto original = a.gather();
  const auto untouched_sum = content_checksum(a);

  checkpoint::directory(first_grid, dir.file("checkpoints"))
      .save(a, lu_result{}, checkpoint::progress{}, "untouched");
  {
    const checkpoint::directory d(second_grid, dir.file("checkpoints"));
    EXPECT_EQ(d.summary().done.columns_done, 0);
    dist_matrix<T> b(second_grid, n, n, 7);
    auto start = d.load(b);
    EXPECT_EQ(start.columns_done, 0);
    EXPECT_EQ(start.first_zero_pivot, -1);
    EXPECT_EQ(content_checksum(b), untouched_sum);
    const auto lu = factor(b, std::move(start));
    const auto ours = b.gather();
    if (is_root()) {
      const auto ref = lapack_lu(original, n);
      EXPECT_EQ(lu.pivots, ref.pivots);
      EXPECT_LE(max_difference(ours, ref.factors), n * epsilon<T>() * max_row_sum(original, n));
    }
  }

  const auto complete = factor(a);
  const auto complete_sum = content_checksum(a);
  checkpoint::directory(first_grid, dir.file("checkpoints"))
      .save(a, complete, checkpoint::progress{n, 1, 0, 1}, "complete");
  const checkpoint::directory d(second_grid, dir.file("checkpoints"));
  EXPECT_EQ(d.summary().job_id, "complete");
  EXPECT_EQ(d.summary().done.columns_done, n);
  dist_matrix<T> c(second_grid, n, n, 3);
  auto end = d.load(c);
  EXPECT_EQ(end.columns_done, n);
  EXPECT_EQ(end.pivots, complete.pivots);
  EXPECT_EQ(content_checksum(c), complete_sum);
  const auto again = factor(c, std::move(end));
  EXPECT_EQ(again.pivots, complete.pivots);
  EXPECT_EQ(content_checksum(c), complete_sum) << "continuing a finished state changed it";
}

// A zero pivot met before the stop is part of the state: column 1 is zero, so it stays
// exactly zero through the elimination and LAPACK reports info = 2.
TYPED_TEST(State, AZeroPivotBeforeTheStopSurvivesTheCheckpoint) {
  using T = TypeParam;
  const scratch_dir dir;
  const auto shapes = shapes_for_world();
  const process_grid first_grid(MPI_COMM_WORLD, shapes.front());
  const process_grid second_grid(MPI_COMM_WORLD, shapes.back());
  const index_t n = 33;
  const auto entry = [](index_t i, index_t j) { return j == 1 ? T(0) : random_entry<T>(33, i, j); };
  dist_matrix<T> a(first_grid, n, n, 4);
  a.fill(entry);
  const auto original = a.gather();
  const auto stopped = factor_until(a, 10);
  EXPECT_EQ(stopped.first_zero_pivot, 1);
  checkpoint::directory(first_grid, dir.file("checkpoints"))
      .save(a, stopped, checkpoint::progress{stopped.columns_done}, "zero");

  const checkpoint::directory d(second_grid, dir.file("checkpoints"));
  dist_matrix<T> b(second_grid, n, n, 6);
  auto loaded = d.load(b);
  EXPECT_EQ(loaded.first_zero_pivot, 1);
  const auto lu = factor(b, std::move(loaded));
  const auto ours = b.gather();
  if (is_root()) {
    const auto ref = lapack_lu(original, n);
    EXPECT_EQ(ref.info, 2);
    EXPECT_EQ(lu.first_zero_pivot + 1, ref.info);
    EXPECT_EQ(lu.pivots, ref.pivots);
    EXPECT_LE(max_difference(ours, ref.factors), n * epsilon<T>() * max_row_sum(original, n));
  }
}

// job.json and complete.json hold exactly the text last recorded; remove_state leaves
// the job, clear leaves nothing; after a save nothing but the documented files remains.
TEST(Directory, RecordsRemovalAndClearing) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().back());
  const checkpoint::directory d(grid, dir.file("checkpoints"));
  EXPECT_EQ(d.path(), dir.file("checkpoints"));
  EXPECT_EQ(fs::path(d.state_path()).parent_path(), fs::path(dir.file("checkpoints")));
  EXPECT_FALSE(d.has_state());
  EXPECT_EQ(d.job(), "");
  EXPECT_EQ(d.completion(), "");
  expect_error(error_kind::input, "summary without a state", [&] { (void)d.summary(); });

  const std::string long_job = R"({"input": ")" + std::string(300, 'x') + R"("})";
  d.record_job(long_job);
  EXPECT_EQ(d.job(), long_job);
  d.record_job(R"({"n": 3})");  // shorter: nothing of the longer text may remain
  EXPECT_EQ(d.job(), R"({"n": 3})");
  d.record_completion(R"({"output": "x.h5"})");
  EXPECT_EQ(d.completion(), R"({"output": "x.h5"})");

  dist_matrix<double> a(grid, 12, 12, 5);
  a.fill([](index_t i, index_t j) { return random_entry<double>(3, i, j); });
  d.save(a, lu_result{}, checkpoint::progress{}, "job");
  EXPECT_TRUE(d.has_state());
  bool state_file_exists = false;
  std::vector<std::string> unexpected;
  if (is_root()) {
    state_file_exists = fs::exists(d.state_path());
    const std::set<std::string> documented = {"lock", "job.json", "checkpoint.h5", "complete.json"};
    for (const auto& e : fs::directory_iterator(dir.file("checkpoints")))
      if (!documented.count(e.path().filename().string()))
        unexpected.push_back(e.path().filename().string());
    EXPECT_TRUE(state_file_exists);
    EXPECT_TRUE(unexpected.empty()) << "left behind: " << unexpected.front();
  }

  d.remove_state();
  EXPECT_FALSE(d.has_state());
  EXPECT_EQ(d.job(), R"({"n": 3})");
  d.save(a, lu_result{}, checkpoint::progress{}, "job");
  d.clear();
  EXPECT_FALSE(d.has_state());
  EXPECT_EQ(d.job(), "");
  EXPECT_EQ(d.completion(), "");
}

// Whether an exclusive flock on the file can be had (and at once given back).
bool can_lock(const fs::path& file) {
  const int fd = open(file.c_str(), O_RDWR);
  if (fd < 0) return false;
  const bool ok = flock(fd, LOCK_EX | LOCK_NB) == 0;
  close(fd);
  return ok;
}

// One run at a time: while a directory object holds the lock, another on the same path
// is refused (flock locks belong to an open file description, so even a second open in
// this process must be refused); once the first is gone the path is free again.
TEST(Directory, ASecondUserOfTheSamePathIsRefusedWhileTheFirstLives) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  {
    const checkpoint::directory first(grid, dir.file("checkpoints"));
    first.record_job("{}");
    try {
      const checkpoint::directory second(grid, dir.file("checkpoints"));
      ADD_FAILURE() << "a second directory on a locked path was accepted";
    } catch (const gridlu::error& e) {
      EXPECT_EQ(static_cast<int>(e.kind()), static_cast<int>(error_kind::output)) << e.what();
      EXPECT_NE(std::string(e.what()).find(dir.file("checkpoints")), std::string::npos)
          << "the error does not name the directory: " << e.what();
    }
    // The refusal took nothing from the first: its files, and its lock, which this test
    // cannot take either through a descriptor of its own.
    EXPECT_EQ(first.job(), "{}");
    if (is_root()) {
      EXPECT_TRUE(fs::exists(fs::path(dir.file("checkpoints")) / "lock"));
      EXPECT_FALSE(can_lock(fs::path(dir.file("checkpoints")) / "lock"));
    }
  }
  // Released with the object.
  if (is_root()) {
    EXPECT_TRUE(can_lock(fs::path(dir.file("checkpoints")) / "lock"));
  }
  const checkpoint::directory again(grid, dir.file("checkpoints"));
  EXPECT_EQ(again.job(), "{}");
}

// A path that cannot be a directory is refused on every rank.
TEST(Directory, APathThatIsAFileIsRefused) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  const std::string file = dir.file("plain-file");
  if (is_root()) std::ofstream(file) << "not a directory\n";
  comm::barrier(grid.all());
  EXPECT_THROW(checkpoint::directory(grid, file), gridlu::error);
}

TEST(Directory, RequireSpaceRefusesWhatTheDiskCannotHold) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  const checkpoint::directory d(grid, dir.file("checkpoints"));
  EXPECT_NO_THROW(d.require_space(1e3));
  expect_error(error_kind::output, "1e30 bytes", [&] { d.require_space(1e30); });
}

// The newer state replaces the older one whole.
TEST(Directory, ALaterSaveReplacesTheEarlierOne) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().front());
  const index_t n = 40;
  dist_matrix<double> a(grid, n, n, 6);
  a.fill([](index_t i, index_t j) { return random_entry<double>(40, i, j); });
  const checkpoint::directory d(grid, dir.file("checkpoints"));
  const auto early = factor_until(a, 6);
  d.save(a, early, checkpoint::progress{early.columns_done, 1, 0, 1}, "job");
  const auto later = factor(a, lu_result(early), [&] {
    lu_options o;
    o.after_step = [&](const lu_result& st) {
      return st.columns_done >= 25 ? step_request::stop : step_request::go_on;
    };
    return o;
  }());
  EXPECT_GT(later.columns_done, early.columns_done);
  d.save(a, later, checkpoint::progress{later.columns_done, 2, 0, 2}, "job");
  EXPECT_EQ(d.summary().done.columns_done, later.columns_done);
  EXPECT_EQ(d.summary().done.checkpoints, 2);
  dist_matrix<double> b(grid, n, n, 6);
  const auto loaded = d.load(b);
  EXPECT_EQ(loaded.columns_done, later.columns_done);
  EXPECT_EQ(content_checksum(b), content_checksum(a));
}

// Rank 0 rewrites, in place, every occurrence of `from` in the file by `to` (same
// length) and tells every rank how many it found.
int rewrite_bytes(const process_grid& grid, const std::string& path, const std::string& from,
                  const std::string& to) {
  std::int64_t found = 0;
  if (grid.rank() == 0) {
    std::string bytes;
    {
      std::ifstream in(path, std::ios::binary);
      bytes.assign(std::istreambuf_iterator<char>(in), {});
    }
    for (auto at = bytes.find(from); at != std::string::npos; at = bytes.find(from, at + 1)) {
      bytes.replace(at, from.size(), to);
      ++found;
    }
    std::ofstream(path, std::ios::binary | std::ios::trunc) << bytes;
  }
  comm::broadcast(grid.all(), &found, 1, 0);
  return static_cast<int>(found);
}

template <class V>
std::string bytes_of(const V* values, std::size_t count) {
  return std::string(reinterpret_cast<const char*>(values), count * sizeof(V));
}

// Loads that must be refused with an input error: another element type or size than
// saved, a file that is not a checkpoint, a truncated one, and ones whose pivots or
// matrix were altered on disk behind the checksums' back. The alterations find the raw
// values in the file by their bytes (HDF5 stores contiguous datasets as they are, in
// native order): pivots as 64-bit integers, the matrix row by row.
TEST(Directory, StatesThatDoNotFitOrWereAlteredAreRefused) {
  const scratch_dir dir;
  const process_grid grid(MPI_COMM_WORLD, shapes_for_world().back());
  const index_t n = 48;
  dist_matrix<double> a(grid, n, n, 8);
  a.fill([](index_t i, index_t j) { return random_entry<double>(48, i, j); });
  const auto state = factor_until(a, 20);
  const auto work = a.gather();
  const checkpoint::directory d(grid, dir.file("checkpoints"));
  const auto save = [&] { d.save(a, state, checkpoint::progress{state.columns_done}, "job"); };
  save();

  dist_matrix<float> other_type(grid, n, n, 8);
  expect_error(error_kind::input, "another element type", [&] { d.load(other_type); });
  dist_matrix<double> other_size(grid, n + 1, n + 1, 8);
  expect_error(error_kind::input, "another size", [&] { d.load(other_size); });
  dist_matrix<double> b(grid, n, n, 5);
  EXPECT_EQ(d.load(b).columns_done, state.columns_done);  // the file itself is sound

  // A pivot changed to another row the search could have chosen.
  std::vector<std::int64_t> pivots(state.pivots.begin(), state.pivots.begin() + 12);
  const std::string before = bytes_of(pivots.data(), pivots.size());
  pivots[3] = pivots[3] == n - 1 ? n - 2 : n - 1;
  EXPECT_GE(rewrite_bytes(grid, d.state_path(), before, bytes_of(pivots.data(), pivots.size())), 1)
      << "the pivots were not found in the file as 64-bit integers";
  expect_error(error_kind::input, "altered pivots", [&] { d.load(b); });

  // One entry of the working matrix off by one unit in the last place.
  save();
  std::vector<double> row(6);  // row 30, columns 10..15, contiguous in the file
  if (is_root()) {             // the gathered matrix is there only
    for (index_t j = 0; j < 6; ++j) row[j] = work[static_cast<std::size_t>(30 + (10 + j) * n)];
  }
  const std::string row_before = bytes_of(row.data(), row.size());
  row[2] = std::nextafter(row[2], 2.0);
  EXPECT_EQ(rewrite_bytes(grid, d.state_path(), row_before, bytes_of(row.data(), row.size())), 1)
      << "the row was not found in the file";
  expect_error(error_kind::input, "an altered matrix entry", [&] { d.load(b); });

  // Half a file, and a file that is no HDF5 at all.
  save();
  if (is_root()) fs::resize_file(d.state_path(), fs::file_size(d.state_path()) / 2);
  comm::barrier(grid.all());
  expect_error(error_kind::input, "a truncated file", [&] { d.load(b); });
  if (is_root()) std::ofstream(d.state_path(), std::ios::trunc) << "not a checkpoint\n";
  comm::barrier(grid.all());
  expect_error(error_kind::input, "summary of a text file", [&] { (void)d.summary(); });
  expect_error(error_kind::input, "a text file", [&] { d.load(b); });
}

}  // namespace
