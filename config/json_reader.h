// ObjectReader: typed, validating access to one JSON object of the config.
// Every accessor records a Problem (with the JSON pointer) instead of throwing,
// so that a whole file is checked in one pass. finish() reports every key that
// no accessor asked for: a typo must never pass silently.
//
// Used by config/ itself and by drivers and uplink backends for their own
// option blocks (principle 2: the owner of a block validates it).
#pragma once

#include <cstdint>
#include <initializer_list>
#include <optional>
#include <set>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "config/problems.h"

namespace tarn::config {

using Json = nlohmann::json;

enum class Need { required, optional };

class ObjectReader {
 public:
  // REQUIRES: `problems` outlives the reader. If `j` is not an object, a
  // problem is recorded and every accessor returns "absent".
  ObjectReader(const Json& j, std::string pointer, Problems& problems);

  bool valid() const { return obj_ != nullptr; }
  const std::string& pointer() const { return pointer_; }
  std::string pointer_of(const std::string& key) const;
  bool has(const std::string& key) const;
  Problems& problems() { return problems_; }

  // Each returns true when the key was present and valid (out is set), false
  // otherwise (out keeps its default). A missing required key is a problem.
  bool string(const std::string& key, std::string& out, Need need = Need::optional);
  bool one_of(const std::string& key, std::string& out, std::initializer_list<const char*> allowed,
              Need need = Need::optional);
  bool integer(const std::string& key, std::int64_t& out, std::int64_t min, std::int64_t max,
               Need need = Need::optional);
  bool integer(const std::string& key, int& out, int min, int max, Need need = Need::optional);
  bool number(const std::string& key, double& out, double min, double max,
              Need need = Need::optional);
  bool boolean(const std::string& key, bool& out, Need need = Need::optional);
  // Returns the raw sub-value (object or array) for the caller to descend into.
  const Json* object(const std::string& key, Need need = Need::optional);
  const Json* array(const std::string& key, Need need = Need::optional);
  // Any JSON value, unchecked here (the caller validates it elsewhere).
  const Json* any(const std::string& key, Need need = Need::optional);

  // Reports unknown keys. Call once, after all accessors.
  void finish();

 private:
  const Json* get(const std::string& key, Need need, const char* type_name);
  const Json* obj_ = nullptr;
  std::string pointer_;
  Problems& problems_;
  std::set<std::string> asked_;
};

// The closest of `candidates` to `word` by edit distance, if it is close
// enough to be a likely typo ("baudrate" -> "baud"), else empty.
std::string closest_match(const std::string& word, const std::vector<std::string>& candidates);

}  // namespace tarn::config
