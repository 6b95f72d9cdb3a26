// Internal: the ordered read -> decode -> join pipeline shared by scan and the fit E-step.
// Records are queued as they are read; a pool decodes them, small records batched by bases so
// that per-task costs do not dominate a fragmented draft, and each record is finished (joined
// into the run's sinks, written out) on the queuing thread in queue order. Outputs therefore do
// not depend on the thread count.
#pragma once

#include <cstdint>
#include <deque>
#include <exception>
#include <functional>
#include <future>
#include <memory>
#include <vector>

#include "thread_pool.hpp"
#include "tidemark/sequence.hpp"

namespace tidemark::detail {

/// One record's work.
class PipelineJob {
public:
    Contig contig;
    virtual ~PipelineJob() = default;
    /// Decodes `contig` with worker `worker`'s decoder. `segments` is the whole pool when the
    /// contig is decoded alone in parallel segments, else nullptr (segments, if any, then run
    /// one after another on this worker: the results are the same). With `segments`, decode
    /// runs on the queuing thread after every job queued before it was finished, and finish()
    /// follows before any later job's, so it may write into the run's sinks itself.
    virtual void decode(int worker, TaskPool* segments) = 0;
    /// Starts work on the bases read so far, on the whole pool, while the rest of the record is
    /// read (records decoded alone only); decode(0, pool) takes it over. Default: nothing.
    virtual void decode_early(TaskPool& pool) { (void)pool; }
    /// Joins the results into the run and writes its outputs: on the queuing thread, in order.
    virtual void finish() = 0;
};

class DecodePipeline {
public:
    /// Says whether a record of this many bases is decoded alone over the whole pool.
    using AloneRule = std::function<bool(int64_t length)>;
    /// `alone`: records it picks are decoded one at a time over the whole pool; the others in
    /// batches of about `batch_bases` bases, one batch per task.
    DecodePipeline(int threads, AloneRule alone, int64_t batch_bases = default_batch_bases);
    ~DecodePipeline();
    DecodePipeline(const DecodePipeline&) = delete;
    DecodePipeline& operator=(const DecodePipeline&) = delete;

    /// About 1 Mbp per task: the time of a task is then far above the cost of queuing it, and a
    /// few batches in flight hold a few Mbp of sequence.
    static constexpr int64_t default_batch_bases = int64_t{1} << 20;

    /// A finished job to reuse for the next record, its contig cleared (its storage, and what
    /// else the job keeps, such as sink forks, then serve again: a draft's 10^5 records would
    /// otherwise allocate and free a few objects each, across threads); nullptr when none is
    /// free. Jobs of one pipeline are of one type.
    std::unique_ptr<PipelineJob> reuse_finished();
    /// Queues a job. Jobs queued earlier may be finished during the call. An error of a job
    /// (thrown by decode or finish) is rethrown here or by a later call, after every job queued
    /// before it has been finished, as with one thread.
    void queue(std::unique_ptr<PipelineJob> job);
    /// For a job whose record is still being read (SequenceSource::watch_growth): once the
    /// record is long enough to be decoded alone, finishes the jobs queued before it and lets
    /// it start on its bases read so far (PipelineJob::decode_early). Queue it when read.
    void reading(PipelineJob& job);
    /// Finishes every job queued so far.
    void drain();
    /// The pool, for work that must run with no job in flight (after drain()); nullptr with
    /// one thread.
    TaskPool* pool() { return threads_ > 1 ? &pool_ : nullptr; }

private:
    struct Batch {
        std::vector<std::unique_ptr<PipelineJob>> jobs;
        size_t decoded = 0;        ///< jobs decoded before an error (all of them without one)
        std::exception_ptr error;  ///< of jobs[decoded]
        std::future<void> done;
    };
    void submit_open_batch();
    void finish_oldest();
    /// After an error: the jobs queued after the failed one are never finished (as with one
    /// thread), so that a later drain() (a caller's cleanup) neither writes their outputs nor
    /// throws their errors in place of the first.
    void abandon();
    void recycle(std::unique_ptr<PipelineJob> job);

    int threads_;
    AloneRule alone_;
    int64_t batch_bases_;
    std::unique_ptr<Batch> open_;  ///< the batch being filled
    int64_t open_bases_ = 0;
    std::deque<std::unique_ptr<Batch>> in_flight_;
    std::vector<std::unique_ptr<PipelineJob>> finished_;
    TaskPool pool_;  ///< last: destroyed first, waiting for running batches while they exist
};

}  // namespace tidemark::detail
