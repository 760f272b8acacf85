#include "trainer/online/publish_schedule.h"

namespace plumb::online {

bool PublishSchedule::Due(bool requested, Clock::time_point now) const {
  if (requested) return true;
  if (!HasUnpublished()) return false;
  const double since = std::chrono::duration<double>(now - last_publish_).count();
  return events_ >= every_events_ || since >= every_seconds_;
}

}  // namespace plumb::online
