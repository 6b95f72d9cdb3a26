// A small fixed pool of worker threads whose tasks know their worker index (one decoder each);
// PosteriorDecoder runs the segments of a long contig on one.
#pragma once

#include <condition_variable>
#include <deque>
#include <exception>
#include <functional>
#include <future>
#include <mutex>
#include <thread>
#include <vector>

namespace tidemark {

/// Threads to use for a request: N > 0 as given, 0 = every core the system reports (at least 1).
int resolve_threads(int requested);

/// Runs submitted tasks on `threads` workers in submission order of start (not of finish).
/// With one thread there are no workers: submit() runs the task at once on the caller's
/// thread, so --threads 1 involves no synchronisation at all. Task exceptions travel through
/// the returned future. The destructor drops tasks not yet started and waits for running ones.
class TaskPool {
public:
    explicit TaskPool(int threads);
    ~TaskPool();
    TaskPool(const TaskPool&) = delete;
    TaskPool& operator=(const TaskPool&) = delete;

    int threads() const { return threads_; }
    /// task(worker) with worker in [0, threads()).
    std::future<void> submit(std::function<void(int)> task);

private:
    void work(int worker);

    int threads_;
    std::mutex mutex_;
    std::condition_variable wake_;
    std::deque<std::packaged_task<void(int)>> queue_;
    bool stop_ = false;
    std::vector<std::thread> workers_;
};

/// Waits for every future, then rethrows the first failure: tasks still running may use the
/// caller's data, so no error leaves before all have stopped.
inline void wait_all(std::vector<std::future<void>>& futures) {
    std::exception_ptr first;
    for (auto& f : futures) {
        try {
            f.get();
        } catch (...) {
            if (!first) first = std::current_exception();
        }
    }
    if (first) std::rethrow_exception(first);
}

}  // namespace tidemark
