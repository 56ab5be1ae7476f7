// Work spread over threads for the host-side commands (tune, refit). Each
// call of fn writes only its own slot, so the thread count cannot change a
// result: callers reduce the slots in index order afterwards.
#pragma once

#include <algorithm>
#include <cstddef>
#include <thread>
#include <vector>

namespace meander {

// Every core this process may use (at least 1).
inline int hardware_threads() { return static_cast<int>(std::max(1u, std::thread::hardware_concurrency())); }

// Runs fn(i) for i in [0, n) on `threads` threads, i spread round-robin (rows
// of similar cost sit next to each other, so each thread gets a fair share).
template <class F>
void parallel_for(std::size_t n, int threads, F&& fn) {
    const std::size_t t = std::max<std::size_t>(1, std::min<std::size_t>(static_cast<std::size_t>(std::max(threads, 1)), n));
    if (t <= 1) {
        for (std::size_t i = 0; i < n; ++i) fn(i);
        return;
    }
    std::vector<std::thread> pool;
    for (std::size_t k = 0; k < t; ++k)
        pool.emplace_back([&, k] {
            for (std::size_t i = k; i < n; i += t) fn(i);
        });
    for (auto& th : pool) th.join();
}

}  // namespace meander
