// A program (plumb-train, plumb-serve) started as a child process for tests, its stdout and
// stderr appended to a log file; and the loopback port and log-tail helpers such tests need.
// The one child-process launcher of every suite.
#pragma once

#include <fcntl.h>
#include <netinet/in.h>
#include <signal.h>
#include <spawn.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <fstream>
#include <sstream>
#include <string>
#include <vector>

extern char** environ;

namespace plumb::testing {

// A TCP port on 127.0.0.1 that was free a moment ago (the system picks it).
inline int FreeLoopbackPort() {
  int fd = ::socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  addr.sin_port = 0;
  ::bind(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr);
  socklen_t len = sizeof addr;
  ::getsockname(fd, reinterpret_cast<sockaddr*>(&addr), &len);
  ::close(fd);
  return ntohs(addr.sin_port);
}

class ChildProcess {
 public:
  // Starts `argv[0]` with `argv`; stdout and stderr are appended to `log_path`.
  ChildProcess(const std::vector<std::string>& argv, const std::string& log_path) {
    posix_spawn_file_actions_t actions;
    posix_spawn_file_actions_init(&actions);
    posix_spawn_file_actions_addopen(&actions, 1, log_path.c_str(), O_WRONLY | O_CREAT | O_APPEND,
                                     0644);
    posix_spawn_file_actions_adddup2(&actions, 1, 2);
    std::vector<char*> args;
    for (const std::string& a : argv) args.push_back(const_cast<char*>(a.c_str()));
    args.push_back(nullptr);
    if (posix_spawn(&pid_, args[0], &actions, nullptr, args.data(), environ) != 0) pid_ = -1;
    posix_spawn_file_actions_destroy(&actions);
  }
  ~ChildProcess() {
    if (pid_ > 0 && !reaped_) {
      ::kill(pid_, SIGKILL);
      Wait();
    }
  }
  ChildProcess(const ChildProcess&) = delete;
  ChildProcess& operator=(const ChildProcess&) = delete;

  bool started() const { return pid_ > 0; }
  void Signal(int sig) { ::kill(pid_, sig); }
  // Waits for the exit; returns the wait status.
  int Wait() {
    int status = 0;
    ::waitpid(pid_, &status, 0);
    reaped_ = true;
    return status;
  }
  // Waits at most timeout_ms for the exit: true, with the wait status in *status, if it came.
  bool WaitFor(int timeout_ms, int* status) {
    for (int waited = 0; waited <= timeout_ms; waited += 10) {
      if (::waitpid(pid_, status, WNOHANG) == pid_) {
        reaped_ = true;
        return true;
      }
      ::usleep(10'000);
    }
    return false;
  }

 private:
  pid_t pid_ = -1;
  bool reaped_ = false;
};

inline std::string ReadTail(const std::string& path, size_t max_bytes = 4000) {
  std::ifstream in(path);
  std::stringstream buf;
  buf << in.rdbuf();
  std::string s = buf.str();
  return s.size() > max_bytes ? s.substr(s.size() - max_bytes) : s;
}

}  // namespace plumb::testing
