// The ordered decode pipeline (pipeline.hpp): batches by bases, at most threads + 1 batches in
// flight, finishing in queue order on the queuing thread.
#include "pipeline.hpp"

#include <algorithm>
#include <utility>

namespace tidemark::detail {

namespace {

// Finished jobs kept for reuse. No more jobs exist at once than fit in the batches in flight, so
// this only caps the list for drafts of tiny records.
constexpr size_t max_finished = size_t{1} << 16;

}  // namespace

DecodePipeline::DecodePipeline(int threads, AloneRule alone, int64_t batch_bases)
    : threads_(std::max(1, threads)),
      alone_(std::move(alone)),
      batch_bases_(batch_bases),
      pool_(threads_) {}

DecodePipeline::~DecodePipeline() = default;

std::unique_ptr<PipelineJob> DecodePipeline::reuse_finished() {
    if (finished_.empty()) return nullptr;
    std::unique_ptr<PipelineJob> job = std::move(finished_.back());
    finished_.pop_back();
    job->contig.clear();
    return job;
}

void DecodePipeline::recycle(std::unique_ptr<PipelineJob> job) {
    if (finished_.size() < max_finished) finished_.push_back(std::move(job));
}

void DecodePipeline::queue(std::unique_ptr<PipelineJob> job) {
    const int64_t length = job->contig.length;
    if (threads_ == 1) {  // nothing to overlap: decode and finish at once
        job->decode(0, nullptr);
        job->finish();
        recycle(std::move(job));
        return;
    }
    if (alone_ && alone_(length)) {
        // Its segments take the whole pool, which must be idle first.
        drain();
        job->decode(0, &pool_);
        job->finish();
        recycle(std::move(job));
        return;
    }
    if (!open_) open_ = std::make_unique<Batch>();
    open_->jobs.push_back(std::move(job));
    open_bases_ += length;
    if (open_bases_ >= batch_bases_) submit_open_batch();
}

void DecodePipeline::reading(PipelineJob& job) {
    if (threads_ == 1 || !alone_ || !alone_(job.contig.length)) return;
    drain();  // what the job's queue() would wait for anyway; the pool is then its own
    job.decode_early(pool_);
}

void DecodePipeline::submit_open_batch() {
    if (!open_) return;
    // Each worker busy, one batch more waiting: the reader stays at most that far ahead.
    while (in_flight_.size() > static_cast<size_t>(threads_)) finish_oldest();
    Batch* b = open_.get();
    in_flight_.push_back(std::move(open_));
    open_bases_ = 0;
    b->done = pool_.submit([b](int worker) {
        for (; b->decoded < b->jobs.size(); ++b->decoded) {
            try {
                b->jobs[b->decoded]->decode(worker, nullptr);
            } catch (...) {
                b->error = std::current_exception();
                return;  // later jobs of the batch are never finished
            }
        }
    });
}

void DecodePipeline::finish_oldest() {
    std::unique_ptr<Batch> b = std::move(in_flight_.front());
    in_flight_.pop_front();
    try {
        b->done.get();
        for (size_t k = 0; k < b->decoded; ++k) {
            b->jobs[k]->finish();
            recycle(std::move(b->jobs[k]));
        }
        if (b->error) std::rethrow_exception(b->error);
    } catch (...) {
        abandon();
        throw;
    }
}

void DecodePipeline::abandon() {
    open_.reset();
    open_bases_ = 0;
    for (auto& later : in_flight_) later->done.wait();  // their tasks use the batches
    in_flight_.clear();
}

void DecodePipeline::drain() {
    submit_open_batch();
    while (!in_flight_.empty()) finish_oldest();
}

}  // namespace tidemark::detail
