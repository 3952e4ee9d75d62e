// Independent work items spread over threads. Each item writes only its own result slot, and the
// caller combines the slots in index order afterwards, so a result never depends on the number
// of threads (`--jobs`), bit for bit.
#pragma once

#include <cstddef>
#include <functional>

namespace specloop {

/// Runs work(i, worker) for every i in [0, n), each exactly once, on min(jobs, n) threads (the
/// caller's thread is worker 0; workers are numbered 0 … threads − 1, so per-worker scratch
/// state can be indexed by it). Items are handed out in increasing order. The first exception an
/// item throws is rethrown here after every thread has stopped (the remaining items are skipped).
void parallel_for(std::size_t n, unsigned jobs, const std::function<void(std::size_t, unsigned)>& work);

}  // namespace specloop
