// The service manager's readiness protocol (sd_notify), written directly: one datagram to the
// unix socket named by $NOTIFY_SOCKET ("@name" for the abstract namespace). No library needed;
// without the variable nothing is sent.
#pragma once

#include <chrono>
#include <string>

namespace forewarden {

// Sends `state` (e.g. "READY=1", "STOPPING=1", "WATCHDOG=1", "STATUS=..."); false when there is
// no socket to send to or the send failed.
bool NotifyServiceManager(const std::string& state);

// The watchdog interval asked for by $WATCHDOG_USEC (and $WATCHDOG_PID, if set, naming this
// process), or zero when there is none.
std::chrono::microseconds WatchdogInterval();

}  // namespace forewarden
