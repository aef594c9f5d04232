#include "daemon/control/control_server.h"

#include <poll.h>
#include <sys/socket.h>
#include <sys/stat.h>
#include <sys/un.h>
#include <unistd.h>

#include <boost/asio/read.hpp>
#include <boost/asio/write.hpp>
#include <cstring>

#include "drivers/os/logging.h"

namespace tarn::control {

namespace asio = boost::asio;
using asio::local::stream_protocol;

constexpr std::size_t kMaxRequest = 64 * 1024;

ControlServer::ControlServer(asio::io_context& io, std::string socket_path)
    : io_(io), path_(std::move(socket_path)), alive_(std::make_shared<bool>(true)) {}

ControlServer::~ControlServer() {
  *alive_ = false;
  stop();
}

std::string ControlServer::start() {
  ::unlink(path_.c_str());
  try {
    acceptor_ = std::make_unique<stream_protocol::acceptor>(io_, stream_protocol::endpoint(path_));
  } catch (const std::exception& e) {
    return "cannot listen on control socket " + path_ + ": " + e.what();
  }
  ::chmod(path_.c_str(), 0660);
  accept();
  return {};
}

void ControlServer::stop() {
  if (acceptor_) {
    boost::system::error_code ec;
    acceptor_->close(ec);
    acceptor_.reset();
    ::unlink(path_.c_str());
  }
}

Json ControlServer::dispatch(const std::string& text) {
  Json req;
  try {
    req = Json::parse(text);
  } catch (const std::exception&) {
    return {{"ok", false}, {"error", "request is not valid JSON"}};
  }
  if (!req.is_object() || !req.contains("command") || !req["command"].is_string())
    return {{"ok", false}, {"error", "request needs a \"command\" string"}};
  auto it = handlers_.find(req["command"].get<std::string>());
  if (it == handlers_.end()) {
    std::string list;
    for (auto& [k, v] : handlers_) list += (list.empty() ? "" : ", ") + k;
    return {{"ok", false}, {"error", "unknown command; allowed: " + list}};
  }
  try {
    return it->second(req);
  } catch (const std::exception& e) {
    return {{"ok", false}, {"error", e.what()}};
  }
}

void ControlServer::accept() {
  if (!acceptor_) return;
  std::weak_ptr<bool> alive = alive_;
  acceptor_->async_accept([this, alive](boost::system::error_code ec, stream_protocol::socket s) {
    if (!alive.lock() || !acceptor_) return;
    if (!ec) {
      auto sock = std::make_shared<stream_protocol::socket>(std::move(s));
      auto buf = std::make_shared<std::string>();
      auto chunk = std::make_shared<std::array<char, 4096>>();
      // Read until newline or EOF, then answer.
      auto step = std::make_shared<std::function<void()>>();
      *step = [this, alive, sock, buf, chunk, step] {
        sock->async_read_some(
            asio::buffer(*chunk),
            [this, alive, sock, buf, chunk, step](boost::system::error_code e, std::size_t n) {
              if (!alive.lock()) return;
              buf->append(chunk->data(), n);
              bool done = e || buf->find('\n') != std::string::npos;
              if (buf->size() > kMaxRequest) {
                *buf = "{}";
                done = true;
              }
              if (!done) return (*step)();
              auto reply = std::make_shared<std::string>(dispatch(*buf).dump() + "\n");
              asio::async_write(*sock, asio::buffer(*reply),
                                [sock, reply, step](boost::system::error_code, std::size_t) {
                                  *step = nullptr;  // break the cycle
                                });
            });
      };
      (*step)();
    }
    accept();
  });
}

Json request(const std::string& socket_path, const Json& req, std::string& error, int timeout_ms) {
  int fd = ::socket(AF_UNIX, SOCK_STREAM | SOCK_CLOEXEC, 0);
  sockaddr_un addr{};
  addr.sun_family = AF_UNIX;
  if (socket_path.size() >= sizeof addr.sun_path) {
    error = "control socket path too long: " + socket_path;
    ::close(fd);
    return {};
  }
  std::strncpy(addr.sun_path, socket_path.c_str(), sizeof addr.sun_path - 1);
  if (::connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) != 0) {
    error = "cannot reach the daemon at " + socket_path + ": " + std::strerror(errno) +
            " (is `tarn run` active? see --socket / --config)";
    ::close(fd);
    return {};
  }
  std::string out = req.dump() + "\n";
  if (::write(fd, out.data(), out.size()) != ssize_t(out.size())) {
    error = std::string("cannot send to the daemon: ") + std::strerror(errno);
    ::close(fd);
    return {};
  }
  std::string in;
  char buf[4096];
  for (;;) {
    pollfd p{fd, POLLIN, 0};
    int r = ::poll(&p, 1, timeout_ms);
    if (r <= 0) {
      error = "no answer from the daemon within " + std::to_string(timeout_ms) + " ms";
      ::close(fd);
      return {};
    }
    ssize_t n = ::read(fd, buf, sizeof buf);
    if (n <= 0) break;
    in.append(buf, std::size_t(n));
    if (in.find('\n') != std::string::npos) break;
  }
  ::close(fd);
  try {
    return Json::parse(in);
  } catch (const std::exception&) {
    error = "the daemon's answer is not valid JSON";
    return {};
  }
}

}  // namespace tarn::control
