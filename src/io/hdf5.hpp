// Thin wrappers over the HDF5 C API: one owning handle type and one check. The only
// header that includes hdf5.h; nothing outside src/io/ includes it.
#pragma once

#include <hdf5.h>

#include <string>
#include <utility>

#include "gridlu/error.hpp"
#include "gridlu/scalar.hpp"

namespace gridlu::io::h5 {

// HDF5 returns negative ids and statuses on failure.
template <class R>
R check(R rc, const std::string& what, error_kind code = error_kind::input) {
  if (rc < 0) throw error(code, what);
  return rc;
}

// An owned HDF5 id, closed with the matching H5?close.
class handle {
public:
  using closer = herr_t (*)(hid_t);
  handle() = default;
  handle(hid_t id, closer close) : id_(id), close_(close) {}
  ~handle() {
    if (id_ >= 0) close_(id_);
  }
  handle(handle&& o) noexcept : id_(std::exchange(o.id_, -1)), close_(o.close_) {}
  handle& operator=(handle&& o) noexcept {
    std::swap(id_, o.id_);
    std::swap(close_, o.close_);
    return *this;
  }
  handle(const handle&) = delete;
  handle& operator=(const handle&) = delete;
  hid_t get() const { return id_; }
  // Closes now and reports failure (a file close can fail when data is flushed).
  herr_t release() { return id_ < 0 ? 0 : close_(std::exchange(id_, -1)); }

private:
  hid_t id_ = -1;
  closer close_ = nullptr;
};

inline handle owned_type(hid_t id, const std::string& what) {
  return {check(id, what, error_kind::internal), H5Tclose};
}

// The in-memory HDF5 type of T: native floats, and complex as the compound {r, i} that
// h5py and numpy use.
template <scalar T>
handle memory_type() {
  using R = real_t<T>;
  const hid_t real = std::is_same_v<R, float> ? H5T_NATIVE_FLOAT : H5T_NATIVE_DOUBLE;
  if constexpr (!scalar_traits<T>::is_complex) {
    return owned_type(H5Tcopy(real), "H5Tcopy");
  } else {
    handle t = owned_type(H5Tcreate(H5T_COMPOUND, sizeof(T)), "H5Tcreate");
    check(H5Tinsert(t.get(), "r", 0, real), "H5Tinsert", error_kind::internal);
    check(H5Tinsert(t.get(), "i", sizeof(R), real), "H5Tinsert", error_kind::internal);
    return t;
  }
}

}  // namespace gridlu::io::h5
