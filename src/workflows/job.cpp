#include "workflows/job.hpp"

#include <sys/random.h>

#include <cerrno>
#include <cstdio>
#include <string_view>
#include <type_traits>

namespace gridlu::workflows {

nlohmann::json to_json(const job& j) {
  nlohmann::json out = nlohmann::json::object();
  for_each_field(j, [&](const char* key, const auto& member) { out[key] = member; });
  return out;
}

namespace {
bool is_later_key(std::string_view key) {
  return key == "solve_with" || key == "refine" || key == "require_digits" || key == "precision" ||
         key == "fallback" || key == "entry_error";
}
}  // namespace

job job_from_json(const std::string& text, const std::string& where) {
  const auto damaged = [&](const std::string& what) {
    return error(error_kind::input, where + " is damaged: " + what);
  };
  const auto parsed = nlohmann::json::parse(text, nullptr, false);
  if (parsed.is_discarded() || !parsed.is_object()) throw damaged("not a JSON object");
  job j;
  for_each_field(j, [&](const char* key, auto& member) {
    using M = std::remove_reference_t<decltype(member)>;
    const auto it = parsed.find(key);
    // Keys added since the first gridlu that recorded jobs keep their defaults when
    // absent, so that a job an earlier version started can be resumed by this one.
    if (it == parsed.end() && is_later_key(key)) return;
    const bool fits = it != parsed.end() && [&] {
      if constexpr (std::is_same_v<M, std::string>) return it->is_string();
      if constexpr (std::is_same_v<M, bool>) return it->is_boolean();
      if constexpr (std::is_same_v<M, std::int64_t>) return it->is_number_integer();
      if constexpr (std::is_same_v<M, double>) return it->is_number();
    }();
    if (!fits) throw damaged("no valid \"" + std::string(key) + "\"");
    member = it->template get<M>();
  });
  if (j.id.empty() || j.n < 1 || j.nrhs < 1 || j.block < 1 || j.lookahead < 0 || j.input.empty() ||
      j.output.empty() || !(j.checkpoint_every >= 0) || j.require_digits < 0 ||
      (j.solve_with != "A" && j.solve_with != "A^T" && j.solve_with != "A^H") ||
      (j.precision != "double" && !is_mixed(j.precision)) || (j.refine && is_mixed(j.precision)))
    throw damaged("it records an impossible job");
  return j;
}

bool is_mixed(const std::string& precision) {
  return precision == "mixed" || precision == "mixed-krylov";
}

void write_attributes(io::file& f, const std::string& object, const job& j) {
  for_each_field(j, [&](const char* key, const auto& member) {
    using M = std::remove_cvref_t<decltype(member)>;
    if constexpr (std::is_same_v<M, bool>)
      f.set_attribute(object, key, std::int64_t{member});
    else
      f.set_attribute(object, key, member);
  });
}

bool marks_completion(const std::string& marker, const job& j) {
  const auto m = nlohmann::json::parse(marker, nullptr, false);
  const auto id = m.is_object() ? m.find("job_id") : m.end();
  return m.is_object() && id != m.end() && id->is_string() && id->get<std::string>() == j.id;
}

std::string new_job_id() {
  unsigned char bytes[16];
  std::size_t got = 0;
  while (got < sizeof bytes) {
    const ssize_t n = getrandom(bytes + got, sizeof bytes - got, 0);
    if (n < 0 && errno != EINTR)
      throw error(error_kind::internal, "no random source for a job identity");
    if (n > 0) got += static_cast<std::size_t>(n);
  }
  std::string id;
  char hex[3];
  for (const unsigned char b : bytes) {
    std::snprintf(hex, sizeof hex, "%02x", b);
    id += hex;
  }
  return id;
}

bool same_work(const job& a, const job& b) {
  return a.input == b.input && a.matrix_dataset == b.matrix_dataset && a.rhs_file == b.rhs_file &&
         a.rhs_dataset == b.rhs_dataset && a.column_major == b.column_major &&
         a.solve_with == b.solve_with && is_mixed(a.precision) == is_mixed(b.precision) &&
         a.output == b.output;
}

}  // namespace gridlu::workflows
