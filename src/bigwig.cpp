// bigWig output through libBigWig. Its header declares global names (e.g. min, max), so it is
// included in this file only.
#include <cstdio>
#include <cstring>
#include <unistd.h>
#include <vector>

#include "tidemark/error.hpp"
#include "tidemark/track.hpp"

extern "C" {
#include <bigWig.h>
}

namespace tidemark {

namespace {
struct Record {
    uint32_t sequence, start, end;
    float value;
};
}  // namespace

struct BigWigWriter::Impl {
    std::string path;
    std::FILE* spool = nullptr;  // intervals wait here until the sequence list is complete
    std::vector<std::string> names;
    std::vector<uint32_t> lengths;
};

BigWigWriter::BigWigWriter(std::string path) : impl_(std::make_unique<Impl>()) {
    impl_->path = std::move(path);
    impl_->spool = std::tmpfile();
    if (!impl_->spool) throw IoError(impl_->path + ": cannot create a temporary spool file");
}

BigWigWriter::~BigWigWriter() {
    if (impl_->spool) std::fclose(impl_->spool);
}

int BigWigWriter::add_sequence(const std::string& name, int64_t length) {
    if (length > 0xFFFFFFFFll)
        throw InputError(name + ": longer than bigWig's 32-bit coordinates allow");
    impl_->names.push_back(name);
    impl_->lengths.push_back(static_cast<uint32_t>(length));
    return static_cast<int>(impl_->names.size() - 1);
}

void BigWigWriter::add(int sequence, int64_t start, int64_t end, double value) {
    const Record r{static_cast<uint32_t>(sequence), static_cast<uint32_t>(start),
                   static_cast<uint32_t>(end), static_cast<float>(value)};
    if (std::fwrite(&r, sizeof r, 1, impl_->spool) != 1)
        throw IoError(impl_->path + ": cannot write the temporary spool file");
}

void BigWigWriter::close() {
    StagedPath staged(impl_->path);
    ::close(staged.release_fd());
    if (bwInit(1 << 17) != 0) throw IoError("libBigWig failed to initialise");
    bigWigFile_t* bw = bwOpen(staged.temp().c_str(), nullptr, "w");
    const auto fail = [&](const char* what) {
        if (bw) bwClose(bw);
        bwCleanup();
        throw IoError(impl_->path + ": cannot write bigWig (" + what + ")");
    };
    if (!bw) fail("open");
    if (bwCreateHdr(bw, 10) != 0) fail("header");
    std::vector<const char*> names;
    for (const auto& n : impl_->names) names.push_back(n.c_str());
    bw->cl = bwCreateChromList(names.data(), impl_->lengths.data(), static_cast<int64_t>(names.size()));
    if (!bw->cl || bwWriteHdr(bw) != 0) fail("sequence list");

    std::rewind(impl_->spool);
    constexpr size_t batch = 1 << 16;
    std::vector<Record> records(batch);
    std::vector<uint32_t> starts, ends;
    std::vector<float> values;
    std::vector<const char*> chroms;
    int64_t current = -1;
    size_t got = 0;
    while ((got = std::fread(records.data(), sizeof(Record), batch, impl_->spool)) > 0) {
        size_t i = 0;
        while (i < got) {
            const uint32_t seq = records[i].sequence;
            starts.clear();
            ends.clear();
            values.clear();
            for (; i < got && records[i].sequence == seq; ++i) {
                starts.push_back(records[i].start);
                ends.push_back(records[i].end);
                values.push_back(records[i].value);
            }
            const auto n = static_cast<uint32_t>(starts.size());
            int rc = 0;
            if (static_cast<int64_t>(seq) != current) {
                chroms.assign(n, names[seq]);
                rc = bwAddIntervals(bw, chroms.data(), starts.data(), ends.data(), values.data(), n);
                current = seq;
            } else {
                rc = bwAppendIntervals(bw, starts.data(), ends.data(), values.data(), n);
            }
            if (rc != 0) fail("intervals");
        }
    }
    if (std::ferror(impl_->spool)) fail("spool read");
    bwClose(bw);  // writes the zoom levels and the index
    bw = nullptr;
    bwCleanup();
    staged.commit();
}

}  // namespace tidemark
