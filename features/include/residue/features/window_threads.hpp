// One image's analysis windows on several cores, when those cores are idle.
//
// A request on an idle service should use every core; a busy service should not start more
// threads than it has cores (that only adds switching and memory). The policy, measured in
// docs/performance.md ("Speed, second round", "Windows in parallel"): the process keeps cores - 1 helper threads, started
// on first use. A caller always works on its own thread; helpers join only while they are idle and
// fewer callers than cores are at work, so under load every request runs on its own thread alone,
// as before. Results do not depend on who computed what: the caller gives each index to exactly one
// thread and combines them itself, in index order.
//
// Thread safety: parallel_indices may be called from any number of threads at once.
#pragma once

#include <cstddef>
#include <functional>

namespace residue {

// Runs work(i) once for every i in [0, count), on the calling thread and on up to
// `max_threads - 1` idle helpers; returns when all have finished. An exception thrown by work is
// rethrown here (the first one; the others are dropped). max_threads <= 1 runs everything here.
void parallel_indices(size_t count, int max_threads, const std::function<void(size_t)>& work);

// The cores the policy counts (std::thread::hardware_concurrency, at least 1).
int available_cores();

}  // namespace residue
