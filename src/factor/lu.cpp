// Right-looking blocked LU with partial pivoting on the block-cyclic grid, with panels
// factored and sent ahead of the trailing update.
#include "gridlu/lu.hpp"

#include <algorithm>
#include <cstdint>
#include <deque>
#include <limits>
#include <optional>

#include "comm/collectives.hpp"
#include "factor/interchange.hpp"
#include "factor/unit_lower.hpp"
#include "instantiate.hpp"
#include "kernels/blas.hpp"

namespace gridlu {
namespace {

// Adds the lifetime of the scope to a phase's total.
class phase_clock {
public:
  explicit phase_clock(double& total) : total_(total), start_(comm::wtime()) {}
  ~phase_clock() { total_ += comm::wtime() - start_; }
  phase_clock(const phase_clock&) = delete;
  phase_clock& operator=(const phase_clock&) = delete;

private:
  double& total_;
  double start_;
};

using blas::diagonal;
using blas::op;
using blas::triangle;
using detail::column_range;
using detail::solve_unit_lower;

// Below this many columns the panel recursion goes column by column.
constexpr index_t narrow_width = 16;

// Recursive factorization of the panel of global columns [j0, j0 + jb) on the process
// column that owns it (local columns from lc0): the left half, its interchanges on the
// right half, a triangular solve and one GEMM, then the right half and its interchanges
// on the left half. Most of the work is BLAS-3; only narrow column groups go column by
// column, with one reduction per column that also carries the two rows to interchange.
// A process column of one rank hands its panel to LAPACK instead.
template <scalar T>
class panel_factorization {
public:
  panel_factorization(dist_matrix<T>& a, index_t j0, index_t lc0, std::span<index_t> pivots,
                      double& search_seconds, detail::interchange_buffers<T>& buffers)
      : a_(a),
        j0_(j0),
        lc0_(lc0),
        pivots_(pivots),
        search_seconds_(search_seconds),
        buffers_(buffers) {}

  // Returns the first column with an exactly zero pivot, or -1.
  index_t run() {
    const index_t jb = static_cast<index_t>(pivots_.size());
    if (a_.grid().col().size() == 1) return local(jb);
    columns(j0_, jb);
    return zero_column_;
  }

private:
  index_t lc(index_t j) const { return lc0_ + (j - j0_); }
  std::span<const index_t> pivots_of(index_t j, index_t w) const {
    return pivots_.subspan(static_cast<std::size_t>(j - j0_), static_cast<std::size_t>(w));
  }

  // A process column of one rank holds the whole panel: the pivot search needs no
  // messages, and LAPACK's own panel LU, which fuses its interchanges and updates,
  // runs at about 34 GFLOP/s on an 8192 x 192 panel against 26 for the recursion.
  index_t local(index_t jb) {
    const index_t lr = a_.layout().rows.local_begin(a_.grid().myrow(), j0_);
    ipiv_.resize(static_cast<std::size_t>(jb));
    const int info =
        blas::lapack_getrf(a_.local_rows() - lr, jb, a_.at(lr, lc0_), a_.ld(), ipiv_.data());
    for (index_t t = 0; t < jb; ++t)
      pivots_[static_cast<std::size_t>(t)] = j0_ + ipiv_[static_cast<std::size_t>(t)] - 1;
    return info > 0 ? j0_ + info - 1 : -1;
  }

  void columns(index_t j, index_t w) {
    if (w <= narrow_width) return narrow(j, w);
    const index_t h = w / 2;
    columns(j, h);
    const column_range left{lc(j), lc(j + h)}, right{lc(j + h), lc(j + w)};
    detail::interchange_rows(a_, j, pivots_of(j, h), std::span(&right, 1), buffers_);

    // U12 = inv(L11) A12 on the process row holding rows [j, j + h) (all in one block),
    // sent down the process column (the recursion runs only on columns of more than one
    // rank); then A22 -= L21 U12.
    const auto& rows = a_.layout().rows;
    const auto& col = a_.grid().col();
    const int me = a_.grid().myrow(), pr = rows.owner(j);
    const index_t ld = a_.ld(), lr = rows.local_begin(me, j);
    if (me == pr) solve_unit_lower(h, w - h, a_.at(lr, left.begin), ld, a_.at(lr, right.begin), ld);
    work_.resize(static_cast<std::size_t>(h * (w - h)));
    if (me == pr) copy_block(h, w - h, a_.at(lr, right.begin), ld, work_.data(), h);
    comm::broadcast(col, work_.data(), h * (w - h), pr);
    const index_t lr2 = rows.local_begin(me, j + h), m = a_.local_rows() - lr2;
    blas::gemm(op::none, op::none, m, w - h, h, T(-1), a_.at(lr2, left.begin), ld, work_.data(), h,
               T(1), a_.at(lr2, right.begin), ld);

    columns(j + h, w - h);
    detail::interchange_rows(a_, j + h, pivots_of(j + h, w - h), std::span(&left, 1), buffers_);
  }

  void narrow(index_t j, index_t w) {
    const auto& rows = a_.layout().rows;
    const int me = a_.grid().myrow();
    const index_t mloc = a_.local_rows(), ld = a_.ld();
    pivot_row_.resize(static_cast<std::size_t>(w));
    diagonal_row_.resize(static_cast<std::size_t>(w));
    const auto copy_row = [&](index_t li, T* to) {
      for (index_t c = 0; c < w; ++c) to[c] = *a_.at(li, lc(j) + c);
    };
    const auto store_row = [&](index_t li, const T* from) {
      for (index_t c = 0; c < w; ++c) *a_.at(li, lc(j) + c) = from[c];
    };
    for (index_t t = 0; t < w; ++t) {
      const index_t jj = j + t;
      const T* column = a_.at(0, lc(jj));
      comm::candidate mine{-1.0, -1};
      for (index_t li = rows.local_begin(me, jj); li < mloc; ++li) {
        const double m = static_cast<double>(abs1(column[li]));
        if (m > mine.magnitude) mine = {m, rows.global(me, li)};
      }
      const bool holds_diagonal = rows.owner(jj) == me;
      if (mine.row >= 0) copy_row(rows.local(mine.row), pivot_row_.data());
      if (holds_diagonal) copy_row(rows.local(jj), diagonal_row_.data());
      const auto found = [&] {
        const phase_clock clock(search_seconds_);
        return comm::best_with_rows(a_.grid().col(), mine, pivot_row_.data(), diagonal_row_.data(),
                                    holds_diagonal, w);
      }();
      // A column of NaNs has no candidate and keeps its row.
      const index_t r = found.row < 0 ? jj : found.row;
      const T* pivot_row = found.row < 0 ? diagonal_row_.data() : pivot_row_.data();
      pivots_[static_cast<std::size_t>(jj - j0_)] = r;
      if (r != jj) {
        if (holds_diagonal) store_row(rows.local(jj), pivot_row);
        if (rows.owner(r) == me) store_row(rows.local(r), diagonal_row_.data());
      }

      const T pivot = pivot_row[t];
      const index_t below = rows.local_begin(me, jj + 1), count = mloc - below;
      T* l = a_.at(below, lc(jj));
      if (pivot == T(0)) {
        if (zero_column_ < 0) zero_column_ = jj;
      } else if (std::abs(pivot) >= std::numeric_limits<real_t<T>>::min()) {
        blas::scale(count, T(1) / pivot, l);
      } else {  // 1/pivot would overflow
        for (index_t i = 0; i < count; ++i) l[i] /= pivot;
      }
      blas::rank1(count, w - t - 1, T(-1), l, pivot_row + t + 1, a_.at(below, lc(jj) + 1), ld);
    }
  }

  dist_matrix<T>& a_;
  index_t j0_, lc0_;
  std::span<index_t> pivots_;
  double& search_seconds_;
  detail::interchange_buffers<T>& buffers_;
  index_t zero_column_ = -1;
  std::vector<T> pivot_row_, diagonal_row_, work_;
  std::vector<std::int32_t> ipiv_;
};

template <scalar T>
class blocked_lu {
public:
  blocked_lu(dist_matrix<T>& a, lu_result& result, const lu_options& options)
      : a_(a),
        result_(result),
        options_(options),
        rows_(a.layout().rows),
        cols_(a.layout().cols),
        myrow_(a.grid().myrow()),
        mycol_(a.grid().mycol()) {
    // Panels follow the distribution's blocks; a resumed factorization may start inside
    // one (it was cut with another block size), whose rest is then the first panel.
    starts_.push_back(result.columns_done);
    for (index_t j = result.columns_done; j < a.cols();) {
      const index_t k = rows_.block_of(j);
      j = rows_.block_start(k) + rows_.block_size(k);
      starts_.push_back(j);
    }
    // The columns finished before have every pivot so far; column groups of at most a
    // block keep the message buffers of their interchanges O(n nb).
    const index_t finished = lc(result.columns_done);
    for (index_t c = 0; c < finished; c += a.block())
      held_.push_back({{c, std::min(finished, c + a.block())}, result.columns_done});
  }

  void run() {
    const index_t steps = static_cast<index_t>(starts_.size()) - 1;
    index_t last = -1;  // the last panel started
    bool settling = false, stopping = false;
    for (index_t s = 0; s < steps; ++s) {
      const index_t ahead = std::min(steps - 1, settling ? s : s + options_.lookahead);
      while (last < ahead) start_panel(++last);
      panel& p = flight_.front();
      arrive(p);
      std::copy_n(p.pivots.begin(), p.jb, result_.pivots.begin() + p.j0);
      if (result_.first_zero_pivot < 0) result_.first_zero_pivot = p.pivots[p.jb];

      // The trailing update of everything beyond the panels in flight (which had it
      // before they were factored).
      update(p, {lc(starts_[last + 1]), a_.local_cols()}, true);
      {
        const phase_clock clock(result_.phases.wait);
        p.data_sent.wait();  // the owner's send, before its buffer is reused
      }
      spare_.push_back(std::move(p.data));
      flight_.pop_front();
      // The panel's columns are finished; they lack the pivots after the panel.
      held_.push_back({{lc(starts_[s]), lc(starts_[s + 1])}, starts_[s + 1]});

      result_.columns_done = starts_[s + 1];
      const bool none_ahead = last == s;
      result_.settled = false;
      if (none_ahead && (settling || s + 1 == steps)) settle();
      if (result_.settled) settling = false;
      if (stopping) {
        if (result_.settled) break;
        continue;
      }
      if (!options_.after_step) continue;
      auto request = options_.after_step(result_);
      if (request != step_request::go_on && none_ahead && !result_.settled) {
        settle();
        request = options_.after_step(result_);
      }
      if (request == step_request::stop && result_.settled) break;
      stopping = request == step_request::stop;
      if (request != step_request::go_on && !result_.settled) settling = true;
    }
  }

private:
  // On 2 MiB pages: a fresh panel buffer on 4 KiB pages took 15-25 ms to fault in at
  // the first steps of an n = 4096-8192 factorization, several per cent at n = 4096.
  using panel_buffer = std::vector<T, detail::storage_allocator<T>>;
  // Finished columns (no panel of theirs is in flight) and the pivots they have: those
  // from `applied` to columns_done are held back.
  struct held_columns {
    column_range local;
    index_t applied;
  };
  struct panel {
    index_t j0 = 0, jb = 0;
    index_t lr0 = 0, mp = 0;      // local rows [lr0, lr0 + mp) are those from j0 down
    panel_buffer data;            // those rows of the factored panel, column-major, ld mp,
                                  // then (P > 1) its unit lower triangle L11, ld jb
    std::vector<index_t> pivots;  // jb pivot rows, then the first zero-pivot column or -1
    std::optional<detail::interchange_plan> plan;  // of the pivots, once they are here
    comm::request data_sent, pivots_sent;
    bool arrived = false;
  };

  index_t lc(index_t j) const { return cols_.local_begin(mycol_, j); }
  static std::span<const index_t> pivots_of(const panel& p) {
    return std::span(p.pivots).first(static_cast<std::size_t>(p.jb));
  }

  // Panel t: its process column brings it up to date with the panels in flight, factors
  // it and starts sending it along the process rows; the other ranks post the receive.
  void start_panel(index_t t) {
    panel& p = flight_.emplace_back();
    p.j0 = starts_[t];
    p.jb = starts_[t + 1] - p.j0;
    p.lr0 = rows_.local_begin(myrow_, p.j0);
    p.mp = a_.local_rows() - p.lr0;
    // A dropped panel's buffer (panels shrink as the factorization goes on) saves
    // mapping, faulting in and zeroing a fresh one at every step.
    if (!spare_.empty()) {
      p.data = std::move(spare_.back());
      spare_.pop_back();
    }
    const auto& col = a_.grid().col();
    const index_t diagonal = col.size() > 1 ? p.jb * p.jb : 0;
    p.data.resize(static_cast<std::size_t>(p.mp * p.jb + diagonal));
    p.pivots.assign(static_cast<std::size_t>(p.jb + 1), -1);
    const int pc = cols_.owner(p.j0);
    if (mycol_ == pc) {
      const column_range mine{lc(p.j0), lc(p.j0 + p.jb)};
      for (auto q = flight_.begin(); q != flight_.end() - 1; ++q) {
        arrive(*q);
        update(*q, mine, false);
      }
      const phase_clock clock(result_.phases.panel);
      panel_factorization<T> f(a_, p.j0, mine.begin, std::span(p.pivots).first(p.jb),
                               result_.phases.pivot_search, buffers_);
      p.pivots[p.jb] = f.run();
      copy_block(p.mp, p.jb, a_.at(p.lr0, mine.begin), a_.ld(), p.data.data(), p.mp);
      if (diagonal > 0) {  // every rank of the column solves a share of the U rows
        const int pr = rows_.owner(p.j0);
        T* l11 = p.data.data() + p.mp * p.jb;
        if (myrow_ == pr) copy_block(p.jb, p.jb, p.data.data(), p.mp, l11, p.jb);
        comm::broadcast(col, l11, diagonal, pr);
      }
    }
    const auto& row = a_.grid().row();
    p.data_sent =
        comm::start_broadcast(row, p.data.data(), static_cast<index_t>(p.data.size()), pc);
    p.pivots_sent = comm::start_broadcast(row, p.pivots.data(), p.jb + 1, pc);
  }

  // Applies the interchanges held back from the finished columns. Deferred, they cost
  // one pass in which each column stays in cache, instead of a few scattered entries of
  // every finished column at every step.
  void settle() {
    for (auto& h : held_) bring_up_to_date(h);
    result_.settled = true;
  }

  void bring_up_to_date(held_columns& h) {
    const index_t done = result_.columns_done;
    if (h.applied == done) return;
    const phase_clock clock(result_.phases.interchange);
    const auto pivots = std::span(result_.pivots)
                            .subspan(static_cast<std::size_t>(h.applied),
                                     static_cast<std::size_t>(done - h.applied));
    detail::interchange_rows(a_, h.applied, pivots, std::span(&h.local, 1), buffers_);
    h.applied = done;
  }

  // Brings a few of the finished columns that lack the most interchanges up to date;
  // false when none lacks any. For the time a panel takes to come (a process column of
  // one rank only: elsewhere the interchanges are collective, and the ranks of the
  // column do not wait alike). Small pieces keep the panel's wait from overrunning.
  bool catch_up() {
    constexpr index_t piece = 32;  // columns: at most about 0.3 ms of moves at n = 8192
    const auto most =
        std::min_element(held_.begin(), held_.end(),
                         [](const auto& x, const auto& y) { return x.applied < y.applied; });
    if (most == held_.end() || most->applied == result_.columns_done) return false;
    const index_t rest = most->local.begin + piece;
    if (rest < most->local.end) {
      const held_columns remainder{{rest, most->local.end}, most->applied};
      most->local.end = rest;
      bring_up_to_date(*most);
      held_.push_back(remainder);
    } else {
      bring_up_to_date(*most);
    }
    return true;
  }

  // Waits until panel p is here. Its owners need not wait for their sends to finish:
  // those complete by polling or, at the latest, when the panel is dropped.
  void arrive(panel& p) {
    if (p.arrived || mycol_ == cols_.owner(p.j0)) return;
    if (a_.grid().col().size() == 1)
      while (!p.data_sent.test() && catch_up()) {
      }
    const phase_clock clock(result_.phases.wait);
    p.data_sent.wait();
    p.pivots_sent.wait();
    p.arrived = true;
  }

  void poll() {
    for (auto& p : flight_) {
      p.data_sent.test();
      p.pivots_sent.test();
    }
  }

  // The U block of panel p over w local columns from c, solved, for the whole process
  // column. One rank: in place. More: the panel's process row scatters the block by
  // columns, every rank solves its share and all gather the solved block, which the
  // process row stores back. Solved on one rank while the others waited, the U rows
  // cost the process column their whole solve time at every step.
  std::pair<const T*, index_t> solved_u(const panel& p, index_t c, index_t w) {
    T* u = a_.at(p.lr0, c);
    const index_t ld = a_.ld(), jb = p.jb;
    const auto& col = a_.grid().col();
    const int procs = col.size(), me = col.rank(), pr = rows_.owner(p.j0);
    if (procs == 1) {
      const phase_clock clock(result_.phases.trsm);
      solve_unit_lower(jb, w, p.data.data(), p.mp, u, ld);
      return {u, ld};
    }
    const auto share = [&](int q) { return w / procs + (q < w % procs ? 1 : 0); };  // columns
    std::vector<index_t> counts(static_cast<std::size_t>(procs));
    for (int q = 0; q < procs; ++q) counts[q] = jb * share(q);
    urow_.resize(static_cast<std::size_t>(jb * w));
    ushare_.resize(static_cast<std::size_t>(counts[me]));
    {
      const phase_clock clock(result_.phases.broadcast);
      if (me == pr) copy_block(jb, w, u, ld, urow_.data(), jb);
      comm::scatter(col, urow_.data(), counts, ushare_.data(), counts[me], pr);
    }
    {
      const phase_clock clock(result_.phases.trsm);
      solve_unit_lower(jb, share(me), p.data.data() + p.mp * jb, jb, ushare_.data(), jb);
    }
    const phase_clock clock(result_.phases.broadcast);
    comm::all_gather(col, ushare_.data(), counts[me], urow_.data(), counts);
    if (me == pr) copy_block(jb, w, urow_.data(), jb, u, ld);
    return {urow_.data(), jb};
  }

  // Panel p's interchanges on local columns `target`, the block row of U there and the
  // GEMM below it, chunk by chunk: the rows a chunk's interchanges bring into the U
  // block are still in cache for its solve, and the solved chunk for its GEMM.
  void update(panel& p, column_range target, bool polling) {
    if (target.begin == target.end) return;  // alike on every rank of the process column
    const index_t ld = a_.ld(), lr1 = rows_.local_begin(myrow_, p.j0 + p.jb);
    const index_t m = a_.local_rows() - lr1;
    const T* l = p.data.data() + (lr1 - p.lr0);
    if (!p.plan) {  // a panel updates the look-ahead panels and then the rest: plan once
      const phase_clock clock(result_.phases.interchange);
      p.plan = detail::plan_interchanges(rows_, myrow_, p.j0, pivots_of(p));
    }
    for (index_t c = target.begin; c < target.end; c += options_.update_columns) {
      const index_t w = std::min(options_.update_columns, target.end - c);
      {
        const column_range chunk{c, c + w};
        const phase_clock clock(result_.phases.interchange);
        detail::interchange_rows(a_, *p.plan, std::span(&chunk, 1), buffers_);
      }
      const auto [b, ldb] = solved_u(p, c, w);
      const phase_clock clock(result_.phases.gemm);
      blas::gemm(op::none, op::none, m, w, p.jb, T(-1), l, p.mp, b, ldb, T(1), a_.at(lr1, c), ld);
      if (polling) poll();
    }
  }

  dist_matrix<T>& a_;
  lu_result& result_;
  const lu_options& options_;
  const cyclic_map &rows_, &cols_;
  const int myrow_, mycol_;
  std::vector<index_t> starts_;  // panel t is the global columns [starts_[t], starts_[t + 1])
  std::deque<panel> flight_;     // the panels started and not yet applied, oldest first
  std::vector<T> urow_, ushare_;
  detail::interchange_buffers<T> buffers_;
  std::vector<panel_buffer> spare_;  // buffers of dropped panels, for the next ones
  std::vector<held_columns> held_;
};

}  // namespace

template <scalar T>
lu_result factor(dist_matrix<T>& a, lu_result state, const lu_options& options) {
  if (a.rows() != a.cols()) throw error(error_kind::usage, "LU needs a square matrix");
  if (options.lookahead < 0) throw error(error_kind::usage, "look-ahead depth must be 0 or more");
  if (options.update_columns < 1)
    throw error(error_kind::usage, "update_columns must be 1 or more");
  if (state.columns_done < 0 || state.columns_done > a.rows() || !state.settled)
    throw error(error_kind::internal, "factor: not a state to continue from");
  lu_result result = std::move(state);
  result.phases = {};
  result.pivots.resize(static_cast<std::size_t>(a.rows()));
  blocked_lu<T>(a, result, options).run();
  return result;
}

template <scalar T>
lu_result factor(dist_matrix<T>& a, const lu_options& options) {
  return factor(a, lu_result{}, options);
}

#define INSTANTIATE(T)                                                         \
  template lu_result factor<T>(dist_matrix<T>&, lu_result, const lu_options&); \
  template lu_result factor<T>(dist_matrix<T>&, const lu_options&);
GRIDLU_FOR_EACH_SCALAR(INSTANTIATE)
#undef INSTANTIATE

}  // namespace gridlu
