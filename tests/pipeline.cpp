// The ordered decode pipeline (src/pipeline.hpp): every job is decoded once and finished once,
// in queue order, whatever the thread count and the mix of small (batched) and alone records;
// an error is rethrown after exactly the jobs queued before it have been finished.
#include "pipeline.hpp"

#include <catch2/catch.hpp>
#include <mutex>
#include <stdexcept>
#include <string>
#include <vector>

using namespace tidemark;
using tidemark::detail::DecodePipeline;
using tidemark::detail::PipelineJob;

namespace {

struct Log {
    std::mutex mutex;
    std::vector<int> decoded;
    std::vector<int> finished;
    std::vector<bool> had_pool;  ///< per job id: decoded with the whole pool
};

class RecordingJob final : public PipelineJob {
public:
    RecordingJob(Log& log, int id, int64_t length, int fail_at)
        : log_(log), id_(id), fail_(id == fail_at) {
        const std::vector<uint8_t> codes(static_cast<size_t>(length), 0);
        contig.name = "r" + std::to_string(id);
        contig.append(codes.data(), length);
    }
    void decode(int, TaskPool* segments) override {
        if (fail_) throw std::runtime_error("job " + std::to_string(id_));
        std::lock_guard<std::mutex> lock(log_.mutex);
        log_.decoded.push_back(id_);
        log_.had_pool[static_cast<size_t>(id_)] = segments != nullptr;
    }
    void finish() override { log_.finished.push_back(id_); }
    void decode_early(TaskPool& pool) override {
        early.push_back({contig.length, log_.finished.size(), pool.threads()});
    }
    struct Early {
        int64_t length;
        size_t finished_before;  ///< jobs finished when it was called
        int pool_threads;
    };
    std::vector<Early> early;

private:
    Log& log_;
    int id_;
    bool fail_;
};

// Lengths with every mix: runs of tiny records (many per batch), records of about a batch, and
// long ones that take the whole pool.
std::vector<int64_t> lengths(int n) {
    std::vector<int64_t> out;
    for (int i = 0; i < n; ++i) out.push_back(i % 17 == 5 ? 5000 : i % 7 == 3 ? 900 : 1 + i % 13);
    return out;
}

constexpr int64_t alone_length = 5000;

// Queues every job (failing at `fail_at`, -1 = none); returns the error message, "" without.
std::string run(Log& log, int threads, int64_t batch_bases, int n, int fail_at) {
    log.had_pool.assign(static_cast<size_t>(n), false);
    DecodePipeline pipeline(
        threads, [](int64_t length) { return length >= alone_length; }, batch_bases);
    const std::vector<int64_t> len = lengths(n);
    try {
        for (int i = 0; i < n; ++i) {
            auto job = std::make_unique<RecordingJob>(log, i, len[static_cast<size_t>(i)], fail_at);
            pipeline.queue(std::move(job));
        }
        pipeline.drain();
    } catch (const std::runtime_error& e) {
        return e.what();
    }
    return "";
}

}  // namespace

TEST_CASE("pipeline: every job decoded and finished once, in queue order") {
    const int n = 400;
    for (const int threads : {1, 2, 3}) {
        for (const int64_t batch : {int64_t{1}, int64_t{100}, int64_t{1} << 20}) {
            Log log;
            CHECK(run(log, threads, batch, n, -1).empty());
            std::vector<int> order(static_cast<size_t>(n));
            for (int i = 0; i < n; ++i) order[static_cast<size_t>(i)] = i;
            CHECK(log.finished == order);
            std::vector<int> decoded = log.decoded;
            std::sort(decoded.begin(), decoded.end());
            CHECK(decoded == order);
            // Long records have the whole pool when there is one; the others never.
            const std::vector<int64_t> len = lengths(n);
            for (int i = 0; i < n; ++i)
                CHECK(log.had_pool[static_cast<size_t>(i)] ==
                      (threads > 1 && len[static_cast<size_t>(i)] >= alone_length));
        }
    }
}

TEST_CASE("pipeline: an error comes after exactly the jobs queued before it") {
    for (const int threads : {1, 2}) {
        for (const int fail_at : {0, 1, 7, 22, 299}) {  // 22 is a long record (22 % 17 == 5)
            Log log;
            CHECK(run(log, threads, 1000, 300, fail_at) == "job " + std::to_string(fail_at));
            std::vector<int> before(static_cast<size_t>(fail_at));
            for (int i = 0; i < fail_at; ++i) before[static_cast<size_t>(i)] = i;
            CHECK(log.finished == before);
        }
    }
}

TEST_CASE("pipeline: a finished job serves the next record, its contig cleared") {
    DecodePipeline pipeline(2, nullptr, 1);
    Log log;
    log.had_pool.assign(2, false);
    CHECK(pipeline.reuse_finished() == nullptr);
    auto first = std::make_unique<RecordingJob>(log, 0, 3000, -1);
    const PipelineJob* address = first.get();
    pipeline.queue(std::move(first));
    pipeline.drain();
    const std::unique_ptr<PipelineJob> next = pipeline.reuse_finished();
    REQUIRE(next != nullptr);
    CHECK(next.get() == address);
    CHECK(next->contig.length == 0);
    CHECK(next->contig.name.empty());
    CHECK(pipeline.reuse_finished() == nullptr);
    CHECK(log.finished == std::vector<int>{0});
}

TEST_CASE("pipeline: a record being read starts early once it is long enough to be alone") {
    // The record grows past the alone length (5000) while two small records are queued ahead of
    // it: no early start before that length or with one thread; at it, the earlier jobs are
    // finished first (the pool is then the record's alone), as queue() would do.
    for (const int threads : {1, 2}) {
        DecodePipeline pipeline(
            threads, [](int64_t length) { return length >= alone_length; }, 1 << 20);
        Log log;
        log.had_pool.assign(3, false);
        pipeline.queue(std::make_unique<RecordingJob>(log, 0, 10, -1));
        pipeline.queue(std::make_unique<RecordingJob>(log, 1, 20, -1));
        auto reading = std::make_unique<RecordingJob>(log, 2, 4000, -1);
        pipeline.reading(*reading);
        const std::vector<uint8_t> more(1500, 1);
        reading->contig.append(more.data(), 1500);
        pipeline.reading(*reading);
        reading->contig.append(more.data(), 1500);
        pipeline.reading(*reading);
        const std::vector<RecordingJob::Early> early = reading->early;
        pipeline.queue(std::move(reading));
        pipeline.drain();
        CHECK(log.finished == std::vector<int>{0, 1, 2});
        if (threads == 1) {
            CHECK(early.empty());
            continue;
        }
        REQUIRE(early.size() == 2);
        CHECK((early[0].length == 5500 && early[0].finished_before == 2 &&
               early[0].pool_threads == 2));
        CHECK((early[1].length == 7000 && early[1].finished_before == 2));
        CHECK(log.had_pool[2]);
    }
}

TEST_CASE("pipeline: after an error, a cleanup drain finishes nothing queued after it") {
    // Jobs 0..9 in batches of one record; job 3 fails. The error surfaces in reading() (as it
    // would inside a reader's next()); the caller's cleanup then drains, and must neither finish
    // jobs 4..9 nor throw the error of job 6 in place of job 3's, as with one thread.
    DecodePipeline pipeline(
        2, [](int64_t length) { return length >= alone_length; }, 1);
    Log log;
    log.had_pool.assign(11, false);
    std::string error;
    try {
        for (int i = 0; i < 10; ++i)
            pipeline.queue(std::make_unique<RecordingJob>(log, i, 10, i == 6 ? 6 : 3));
    } catch (const std::runtime_error& e) {
        error = e.what();
    }
    if (error.empty()) {
        RecordingJob reading(log, 10, alone_length, -1);
        try {
            pipeline.reading(reading);
        } catch (const std::runtime_error& e) {
            error = e.what();
        }
    }
    CHECK(error == "job 3");
    pipeline.drain();
    CHECK(log.finished == std::vector<int>{0, 1, 2});
}
