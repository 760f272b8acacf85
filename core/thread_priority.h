// Per-thread CPU priority: how background work (training, refits, retention, snapshot and
// index builds) yields the CPU to request threads on the same host.
#pragma once

namespace plumb {

// Raises the calling thread's niceness to `nice` (0..19; Linux applies nice per thread, and
// threads it creates afterwards inherit it). Never lowers it: a thread already nicer stays so.
// Best effort, no privilege needed: returns false when the system refused or `nice` is outside
// 1..19 (0 means "leave as is" and returns true), and the thread then keeps its priority.
bool LowerThisThreadsPriority(int nice);

// The calling thread's niceness (0 when it cannot be read).
int ThisThreadsNiceness();

}  // namespace plumb
