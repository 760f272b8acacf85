#include "core/thread_priority.h"

#include <sys/resource.h>
#include <sys/syscall.h>
#include <unistd.h>

#include <cerrno>

namespace plumb {

namespace {
id_t ThisThread() { return static_cast<id_t>(::syscall(SYS_gettid)); }
}  // namespace

int ThisThreadsNiceness() {
  errno = 0;
  const int now = ::getpriority(PRIO_PROCESS, ThisThread());
  return errno == 0 ? now : 0;
}

bool LowerThisThreadsPriority(int nice) {
  if (nice == 0) return true;
  if (nice < 1 || nice > 19) return false;
  errno = 0;
  const int now = ::getpriority(PRIO_PROCESS, ThisThread());
  if (errno != 0) return false;
  if (now >= nice) return true;
  return ::setpriority(PRIO_PROCESS, ThisThread(), nice) == 0;
}

}  // namespace plumb
