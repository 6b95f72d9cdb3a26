// The worker pool behind --threads: a mutex-guarded queue, no work stealing (tasks are whole
// contigs or contig segments, so queue traffic is negligible next to the work).
#include "thread_pool.hpp"

#include <algorithm>

namespace tidemark {

int resolve_threads(int requested) {
    if (requested > 0) return requested;
    return std::max(1u, std::thread::hardware_concurrency());
}

TaskPool::TaskPool(int threads) : threads_(std::max(1, threads)) {
    if (threads_ == 1) return;
    workers_.reserve(threads_);
    for (int w = 0; w < threads_; ++w) workers_.emplace_back([this, w] { work(w); });
}

TaskPool::~TaskPool() {
    {
        std::lock_guard<std::mutex> lock(mutex_);
        stop_ = true;
        queue_.clear();  // their futures report broken_promise; nobody waits for them any more
    }
    wake_.notify_all();
    for (auto& t : workers_) t.join();
}

std::future<void> TaskPool::submit(std::function<void(int)> task) {
    std::packaged_task<void(int)> p(std::move(task));
    std::future<void> f = p.get_future();
    if (threads_ == 1) {
        p(0);
        return f;
    }
    {
        std::lock_guard<std::mutex> lock(mutex_);
        queue_.push_back(std::move(p));
    }
    wake_.notify_one();
    return f;
}

void TaskPool::work(int worker) {
    for (;;) {
        std::packaged_task<void(int)> task;
        {
            std::unique_lock<std::mutex> lock(mutex_);
            wake_.wait(lock, [this] { return stop_ || !queue_.empty(); });
            if (stop_) return;
            task = std::move(queue_.front());
            queue_.pop_front();
        }
        task(worker);
    }
}

}  // namespace tidemark
