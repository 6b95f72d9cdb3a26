// Merge, step 2: every record of the input in input order, whole from one shard or split
// between shards and restored from its segments as the single run joins them.
#include <fmt/format.h>

#include "merge_internal.hpp"
#include "summary_internal.hpp"
#include "tidemark/error.hpp"

namespace tidemark::merging {

// The profile of the run (the shards' own, or --profile), checked against the recorded checksum.
SplitContext split_context(const ShardDoc& doc, const std::string& profile_override) {
    const ordered_json& opt = doc.doc["shard"]["options"];
    const std::string name = profile_override.empty() ? opt.value("profile", "") : profile_override;
    Profile profile;
    try {
        profile = load_profile(name);
    } catch (const Error& e) {
        throw InputError(
            fmt::format("{}: records shared between shards need the run's profile to join their "
                        "calls, and '{}' "
                        "cannot be loaded ({}); give it with --profile",
                        doc.path, name, e.what()));
    }
    const std::string recorded = doc.doc["shard"].value("profile_crc32", "");
    if (profile_checksum(profile) != recorded)
        throw InputError(fmt::format(
            "{}: profile '{}' is not the one the shards used (checksum {} vs {}); give the "
            "run's profile with --profile",
            doc.path, name, profile_checksum(profile), recorded));
    const RunOptions options = run_options_from_json(opt, doc.path);
    SplitContext c{compile(profile), options.calling, options.bed_style};
    return c;
}

// Composition of [begin, end) of a split record from the segments' prefix compositions: with G(p)
// the composition of [0, p), it is G(end) - G(begin) less the CpG straddling begin - 1 and begin.
PrefixCompositions::PrefixCompositions(const SplitAssembly& a) {
    Composition base;
    for (const auto& [doc, seg] : a.segments) {
        const bool straddle = !seg->prefixes.empty() && seg->prefixes.front().cpg_before;
        Composition at_end = base;
        for (const PrefixComposition& m : seg->prefixes) {
            Composition g = base;
            g += m.prefix;
            g.cpg += straddle && m.position > seg->begin ? 1 : 0;
            at_[m.position] = {g, m.cpg_before};
            if (m.position == seg->end) at_end = g;
        }
        base = at_end;
    }
}

Composition PrefixCompositions::operator()(int64_t begin, int64_t end) const {
    const auto b = at_.find(begin), e = at_.find(end);
    if (b == at_.end() || e == at_.end())
        throw InputError(
            fmt::format("a call {}-{} of a record shared between shards has no composition mark "
                        "at its ends; the shard summaries were edited or come from another run",
                        begin, end));
    Composition c = e->second.first;
    c -= b->second.first;
    if (b->second.second) --c.cpg;
    return c;
}

// The segments must tile the record in order, and what each holds must lie inside it (calls of
// reported regions, prefix compositions from its start to its end); anything else is an edited or
// foreign file.
void check_segments(const std::vector<ShardDoc>& docs, const SplitAssembly& a, const Model& model) {
    size_t reported = 0;
    for (bool r : model.region_report) reported += r;
    int64_t at = 0;
    for (const auto& entry : a.segments) {
        const size_t doc = entry.first;  // not a structured binding: lambdas capture it (clang 14)
        const SplitSegment* seg = entry.second;
        const auto bad = [&](const char* what) {
            return InputError(fmt::format(
                "{}: record '{}' segment {} ({}-{}): {}; the file was edited or comes "
                "from another run",
                docs[doc].path, a.record.whole.name, seg->index + 1, seg->begin, seg->end, what));
        };
        if (seg->begin != at || seg->end <= seg->begin || seg->end > a.record.whole.length)
            throw bad("does not continue the segment before it");
        at = seg->end;
        if (seg->lanes.size() != reported)
            throw bad("holds another number of reported regions than the profile");
        for (const Call& c : seg->calls)
            if (c.begin < seg->begin || c.end > seg->end || c.begin >= c.end || c.region < 0 ||
                static_cast<size_t>(c.region) >= model.region_names.size() ||
                !model.region_report[c.region])
                throw bad("has a call outside it or of an unreported region");
        if (seg->prefixes.empty() || seg->prefixes.front().position != seg->begin ||
            seg->prefixes.back().position != seg->end)
            throw bad("lacks its composition marks");
        for (size_t m = 1; m < seg->prefixes.size(); ++m)
            if (seg->prefixes[m].position <= seg->prefixes[m - 1].position)
                throw bad("has composition marks out of order");
    }
    if (at != a.record.whole.length)
        throw InputError(
            fmt::format("record '{}': its segments end at {}, not at its "
                        "length {}",
                        a.record.whole.name, at, a.record.whole.length));
}

// Joins the segments' caller and totals states in order, as the single run does.
void join_segments(SplitAssembly& a, const SplitContext& ctx) {
    const Model& model = ctx.model;
    Contig& stub = a.contig;
    stub.name = a.record.whole.name;
    stub.offset = a.record.whole.offset;
    stub.length = a.record.whole.length;
    stub.sequence_length = a.record.full_length;
    IntervalCaller caller(model, ctx.calling);
    caller.use_composition_source(PrefixCompositions(a));
    RegionTotals totals(model);
    caller.begin_contig(stub);
    totals.begin_contig(stub);
    for (const auto& [doc, seg] : a.segments) {
        IntervalCaller span(model, ctx.calling);
        span.begin_contig(stub);
        span.restore_span(seg->lanes, seg->calls);
        caller.join(span);
        RegionTotals part(model);
        part.restore_span(seg->expected);
        totals.join(part);
    }
    DecodeResult result;
    result.log_likelihood = a.record.whole.log_likelihood;
    caller.end_contig(stub, result);
    totals.end_contig(stub, result);
    a.calls = caller.calls();
    ContigSummary& s = a.summary;
    s = a.record.whole;
    s.composition = PrefixCompositions(a)(0, stub.length);  // the whole record, from every segment
    s.unknown = s.composition.unknown;
    const size_t regions = model.region_names.size();
    s.expected_bases = totals.expected_bases();
    s.reset_calls(regions);
    for (const Call& call : a.calls) s.add_call(call, regions);
}

MergedRun assemble(const std::vector<ShardDoc>& docs, const std::string& profile_override) {
    MergedRun run;
    run.slots.assign(static_cast<size_t>(docs.at(0).records), Slot{});
    std::vector<bool> seen_shard(static_cast<size_t>(docs[0].count) + 1, false);
    const auto claim = [&](const ShardDoc& d, int64_t i, const std::string& name) -> Slot& {
        if (i < 0 || i >= d.records)
            throw InputError(
                fmt::format("{}: record '{}' (input index {}) is out of range; the shards were "
                            "planned differently",
                            d.path, name, i));
        return run.slots[static_cast<size_t>(i)];
    };
    const auto overlap = [](const ShardDoc& d, const std::string& name, int64_t i) {
        return InputError(fmt::format(
            "{}: record '{}' (input index {}) is also in another shard; the shards were "
            "planned differently",
            d.path, name, i));
    };
    for (size_t k = 0; k < docs.size(); ++k) {
        const ShardDoc& d = docs[k];
        if (seen_shard[static_cast<size_t>(d.index)])
            throw InputError(
                fmt::format("{}: shard {}/{} is given twice", d.path, d.index, d.count));
        seen_shard[static_cast<size_t>(d.index)] = true;
        for (size_t j = 0; j < d.contigs.size(); ++j) {
            Slot& slot = claim(d, d.contigs[j].input_index, d.contigs[j].name);
            if (slot.doc != SIZE_MAX || slot.split >= 0)
                throw overlap(d, d.contigs[j].name, d.contigs[j].input_index);
            slot.doc = k;
            slot.index = j;
        }
        for (const SplitRecord& r : d.split) {
            bool created = false;
            Slot& slot = claim(d, r.whole.input_index, r.whole.name);
            if (slot.doc != SIZE_MAX) throw overlap(d, r.whole.name, r.whole.input_index);
            if (slot.split < 0) {
                created = true;
                slot.split = static_cast<int>(run.split.size());
                SplitAssembly a;
                a.record = r;
                a.record.done.clear();
                a.segments.assign(r.segments, {SIZE_MAX, nullptr});
                run.split.push_back(std::move(a));
            }
            SplitAssembly& a = run.split[static_cast<size_t>(slot.split)];
            if (a.record.whole.name != r.whole.name || a.record.segments != r.segments ||
                a.record.whole.length != r.whole.length)
                throw InputError(fmt::format(
                    "{}: shared record {} differs from the other shards' ({} vs {})", d.path,
                    r.whole.input_index + 1, r.whole.name, a.record.whole.name));
            if (!created) a.record.whole.soft_masked += r.whole.soft_masked;  // each shard's share
            for (const SplitSegment& seg : r.done) {
                if (seg.index >= a.segments.size() || a.segments[seg.index].second)
                    throw InputError(fmt::format(
                        "{}: record '{}' segment {} is out of range or in another shard too",
                        d.path, r.whole.name, seg.index + 1));
                a.segments[seg.index] = {k, &seg};
                if (seg.index + 1 == r.segments)
                    a.record.whole.log_likelihood = r.whole.log_likelihood;
            }
        }
    }
    for (size_t i = 0; i < run.slots.size(); ++i)
        if (run.slots[i].doc == SIZE_MAX && run.slots[i].split < 0)
            throw InputError(fmt::format(
                "record {} of the input is in no shard; the shards were planned differently",
                i + 1));
    if (!run.split.empty()) {
        const SplitContext ctx = split_context(first_shard(docs), profile_override);
        for (SplitAssembly& a : run.split) {
            std::string missing;
            for (size_t k = 0; k < a.segments.size(); ++k)
                if (!a.segments[k].second)
                    missing += (missing.empty() ? "" : ", ") + std::to_string(k + 1);
            if (!missing.empty())
                throw InputError(
                    fmt::format("shared record '{}': segments {} of {} are in no shard's file",
                                a.record.whole.name, missing, a.segments.size()));
            check_segments(docs, a, ctx.model);
            join_segments(a, ctx);
        }
        run.context = ctx;
    }
    for (const Slot& slot : run.slots)
        run.contigs.push_back(slot.split >= 0 ? run.split[static_cast<size_t>(slot.split)].summary
                                              : docs[slot.doc].contigs[slot.index]);
    return run;
}

// The shard whose file gives a record's sequence entry: the record's own, or for a shared
// record the shard of its first segment.
size_t source_doc(const MergedRun& run, const Slot& slot) {
    return slot.split < 0 ? slot.doc
                          : run.split[static_cast<size_t>(slot.split)].segments.at(0).first;
}

std::string record_name(const std::vector<ShardDoc>& docs, const MergedRun& run, const Slot& slot) {
    return slot.split < 0 ? docs[slot.doc].contigs[slot.index].name
                          : run.split[static_cast<size_t>(slot.split)].record.whole.name;
}

}  // namespace tidemark::merging
