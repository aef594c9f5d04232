// ControlServer: the local control socket for the `tarn` CLI. A Unix stream
// socket (mode 0660) under the runtime directory; one JSON request and one
// JSON reply per connection: {"command": "status", ...} -> {...}.
// Requests larger than 64 KiB are refused. Thread-safety: io_context thread.
#pragma once

#include <boost/asio/io_context.hpp>
#include <boost/asio/local/stream_protocol.hpp>
#include <functional>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <string>

namespace tarn::control {

using Json = nlohmann::json;
using Handler = std::function<Json(const Json& request)>;

class ControlServer {
 public:
  ControlServer(boost::asio::io_context& io, std::string socket_path);
  ~ControlServer();
  // Binds and listens. Returns an error in words, empty on success.
  std::string start();
  void stop();
  void handle(const std::string& command, Handler h) { handlers_[command] = std::move(h); }
  const std::string& path() const { return path_; }

 private:
  void accept();
  Json dispatch(const std::string& text);
  boost::asio::io_context& io_;
  std::string path_;
  std::unique_ptr<boost::asio::local::stream_protocol::acceptor> acceptor_;
  std::map<std::string, Handler> handlers_;
  std::shared_ptr<bool> alive_;
};

// Client side for the CLI: sends one request, waits up to `timeout_ms` for
// the reply. Returns the reply, or sets `error`.
Json request(const std::string& socket_path, const Json& req, std::string& error,
             int timeout_ms = 3000);

}  // namespace tarn::control
