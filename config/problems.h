// Problems found while validating a config: one per mistake, all reported at
// once. Each renders as `FILE: /json/pointer: what is wrong; what is allowed`.
#pragma once

#include <string>
#include <vector>

namespace tarn::config {

struct Problem {
  std::string where;    // JSON pointer ("/lines/0/baud") or "line:column" for syntax errors
  std::string message;  // "what is wrong; what is allowed"
};

class Problems {
 public:
  void add(std::string where, std::string message) {
    list_.push_back({std::move(where), std::move(message)});
  }
  bool empty() const { return list_.empty(); }
  std::size_t size() const { return list_.size(); }
  const std::vector<Problem>& list() const { return list_; }
  // One line per problem, prefixed with `file: `.
  std::string render(const std::string& file) const;

 private:
  std::vector<Problem> list_;
};

// Escapes a key for use in a JSON pointer (RFC 6901: ~ -> ~0, / -> ~1).
std::string pointer_escape(const std::string& key);

}  // namespace tarn::config
