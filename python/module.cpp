// The Python module tidemark._tidemark: a thin pybind11 layer over the public headers. Decoding
// writes region posteriors straight into the buffer numpy gets (no copy), with the GIL released;
// tidemark's errors become the exceptions of tidemark/__init__.py with the command line's text.
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>
#include <sys/mman.h>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdlib>
#include <memory>
#include <optional>
#include <string>
#include <system_error>
#include <thread>
#include <vector>

#include "tidemark/call.hpp"
#include "tidemark/compare.hpp"
#include "tidemark/decode.hpp"
#include "tidemark/error.hpp"
#include "tidemark/intervals.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/scan.hpp"
#include "tidemark/sequence.hpp"
#include "tidemark/simulate.hpp"
#include "tidemark/thread_pool.hpp"
#include "tidemark/track.hpp"
#include "tidemark/train.hpp"
#include "tidemark/window.hpp"

namespace py = pybind11;

namespace tidemark::python {
namespace {

// ---------------------------------------------------------------------------------------------
// Profiles

std::shared_ptr<const Profile> to_profile(const py::object& profile) {
    if (py::isinstance<Profile>(profile)) return profile.cast<std::shared_ptr<Profile>>();
    return std::make_shared<const Profile>(load_profile(profile.cast<std::string>()));
}

py::list regions_of(const Profile& p) {
    py::list out;
    for (const auto& r : p.regions) {
        py::dict d;
        d["name"] = r.name;
        d["report"] = r.report;
        d["description"] = r.description;
        d["color"] = r.color;
        d["min_length"] = r.min_length;
        out.append(d);
    }
    return out;
}

py::list states_of(const Profile& p) {
    py::list out;
    for (const auto& s : p.states) {
        py::dict d;
        d["name"] = s.name;
        d["region"] = p.regions[static_cast<size_t>(s.region)].name;
        if (p.windowed()) {
            if (s.has_gc) {
                d["gc_mean"] = s.gc.mean;
                d["gc_dispersion"] = s.gc.dispersion;
            }
            if (s.signature.present()) {
                d["signature_k"] = s.signature.k;
                d["signature_concentration"] = s.signature.concentration;
            }
        } else {
            d["order"] = s.order;
            py::array_t<double> rows(
                {static_cast<py::ssize_t>(s.emissions.size()), py::ssize_t{4}});
            auto r = rows.mutable_unchecked<2>();
            for (size_t i = 0; i < s.emissions.size(); ++i)
                for (size_t b = 0; b < 4; ++b)
                    r(static_cast<py::ssize_t>(i), static_cast<py::ssize_t>(b)) = s.emissions[i][b];
            d["emissions"] = rows;
        }
        d["tie"] = s.tie;
        out.append(d);
    }
    return out;
}

py::array_t<double> transitions_of(const Profile& p) {
    const auto n = static_cast<py::ssize_t>(p.states.size());
    py::array_t<double> out({n, n});
    auto r = out.mutable_unchecked<2>();
    for (py::ssize_t i = 0; i < n; ++i)
        for (py::ssize_t j = 0; j < n; ++j)
            r(i, j) = p.transitions[static_cast<size_t>(i)][static_cast<size_t>(j)];
    return out;
}

void save_profile(const Profile& p, const std::string& path) {
    OutputFile out(path);
    out.write(to_json(p));
    out.commit();
}

// ---------------------------------------------------------------------------------------------
// Decoding

/// What one decode call or record iterator was asked for, compiled once.
struct DecodeSettings {
    std::shared_ptr<const Profile> profile;
    DecodeMode mode = DecodeMode::posterior;
    std::vector<std::string> columns;  ///< region types of the posterior array ([] = reported)
    bool float32 = false;
    bool posteriors = true;  ///< false: no posterior array (calls, log-likelihood, path only)
    int threads = 0;
    SoftMasked soft_masked = SoftMasked::base;
    ScanOptions calling;  ///< only the calling fields are read (calling_options)
    int64_t block_size = 0;
};

/// The arrays handed to numpy: left uninitialised (the sink writes every cell) and, from 2 MiB on,
/// in transparent huge pages where the kernel offers them on request (madvise mode, Debian's
/// default): a chromosome's array is hundreds of MiB, whose 4-KiB page faults cost about half as
/// much time again as decoding it.
struct Freed {
    void operator()(void* p) const { std::free(p); }
};
template <class T>
using Buffer = std::unique_ptr<T[], Freed>;

constexpr size_t huge = size_t{2} << 20;  ///< a transparent huge page (x86-64)

template <class T>
Buffer<T> allocate(size_t n) {
    const size_t bytes = std::max<size_t>(n * sizeof(T), 1);
    if (bytes < huge) {
        void* p = std::malloc(bytes);
        if (!p) throw std::bad_alloc();
        return Buffer<T>(static_cast<T*>(p));
    }
    const size_t rounded = (bytes + huge - 1) / huge * huge;
    void* p = std::aligned_alloc(huge, rounded);
    if (!p) throw std::bad_alloc();
    madvise(p, rounded, MADV_HUGEPAGE);  // advice only: without huge pages it is a no-op
    return Buffer<T>(static_cast<T*>(p));
}

/// Commits the pages of fresh arrays on a second thread, front to back, while the decoder fills
/// them in the same order. A new page costs the kernel a fault and a clear, and on a virtual
/// machine often the host's work as well (on the benchmark machine, memory unused for a few seconds
/// took about 2.5 ms of system time per MiB to touch again, memory just freed under 0.1 ms;
/// decoding the 131,072 bases of a float64 MiB takes about 3.5 ms); done by the decoding thread
/// that time adds to the decoding, done here it overlaps it when a core is free.
/// MADV_POPULATE_WRITE (Linux 5.14) maps pages without changing what they hold, so what the decoder
/// has written stays; on older kernels it fails and nothing more is done. Small arrays are not
/// worth a thread.
class PageCommitter {
public:
    struct Span {
        void* data;
        size_t bytes;
    };
    /// Spans come from allocate; those of a huge page or more (aligned to it) are committed.
    explicit PageCommitter(std::vector<Span> spans) {
        constexpr size_t worth_a_thread = size_t{64} << 20;
        std::erase_if(spans, [](const Span& s) { return s.bytes < huge; });
        size_t total = 0;
        for (const Span& s : spans) total += s.bytes;
        if (total < worth_a_thread || std::thread::hardware_concurrency() < 2) return;
        try {
            start(std::move(spans));
        } catch (const std::system_error&) {
            // no thread to spare: the decoder faults the pages in itself
        }
    }
    PageCommitter(const PageCommitter&) = delete;
    PageCommitter& operator=(const PageCommitter&) = delete;
    ~PageCommitter() {
        stop_ = true;
        if (thread_.joinable()) thread_.join();
    }

private:
    void start(std::vector<Span> spans) {
        thread_ = std::thread([this, spans = std::move(spans)] {
            constexpr size_t step = size_t{8} << 20;
            for (const Span& s : spans)
                for (size_t done = 0; done < s.bytes; done += step) {
                    if (stop_.load(std::memory_order_relaxed)) return;
                    if (madvise(static_cast<char*>(s.data) + done, std::min(step, s.bytes - done),
                                MADV_POPULATE_WRITE) != 0)
                        return;
                }
        });
    }

    std::atomic<bool> stop_{false};
    std::thread thread_;
};

/// Sums the state posteriors of each block into per-region columns of a caller-owned array
/// (rows = bases) and, for Viterbi, records the path's region per base. Forks write into the same
/// array (their spans are disjoint), so joining has nothing to do.
template <class T>
class ArraySink final : public DecodeSink {
public:
    ArraySink(const Model& model, const std::vector<int>& columns, T* out, int16_t* path)
        : model_(model), out_(out), path_(path) {
        for (int region : columns) {
            std::vector<int> states;
            for (int s = 0; s < model.states; ++s)
                if (model.region_of_state[s] == region) states.push_back(s);
            states_of_column_.push_back(std::move(states));
        }
    }
    void block(const BlockView& v) override {
        const int64_t S = v.states;
        const size_t C = states_of_column_.size();
        for (size_t c = 0; c < C; ++c) {
            const std::vector<int>& states = states_of_column_[c];
            T* out = out_ + static_cast<size_t>(v.begin) * C + c;
            // State by state in index order from 0, as the bedGraph tracks sum (track.cpp), so
            // that the values are those the command line prints (0 + p is p).
            if (states.size() == 1) {
                const double* post = v.posterior + states[0];
                for (int64_t t = 0; t < v.size; ++t) out[t * C] = static_cast<T>(post[t * S]);
                continue;
            }
            for (int64_t t = 0; t < v.size; ++t) {
                double p = 0;
                for (int s : states) p += v.posterior[t * S + s];
                out[t * C] = static_cast<T>(p);
            }
        }
        if (path_)
            for (int64_t t = 0; t < v.size; ++t)
                for (int64_t s = 0; s < S; ++s)
                    if (v.posterior[t * S + s] == 1.0) {
                        path_[v.begin + t] = static_cast<int16_t>(model_.region_of_state[s]);
                        break;
                    }
    }
    std::unique_ptr<DecodeSink> fork() const override { return std::make_unique<ArraySink>(*this); }

private:
    const Model& model_;
    std::vector<std::vector<int>> states_of_column_;
    T* out_;
    int16_t* path_;
};

/// The decoders of one settings object: the compiled model, the model the sinks see (one state
/// per region for window profiles, window.hpp) and a pool for long contigs.
class Engine {
public:
    explicit Engine(DecodeSettings settings)
        : settings_(std::move(settings)),
          decoding_model_(compile(*settings_.profile)),
          model_(decoding_model_.window > 0 ? region_view(decoding_model_) : decoding_model_),
          call_options_(calling_options(settings_.calling, *settings_.profile, model_)) {
        if (settings_.block_size < 0) throw UsageError("block_size must be >= 0");
        if (settings_.threads < 0) throw UsageError("threads must be >= 0 (0 = every core)");
        DecoderOptions options;
        options.block_size = settings_.block_size;
        if (settings_.mode == DecodeMode::posterior)
            posterior_ = std::make_unique<PosteriorDecoder>(decoding_model_, options);
        else
            viterbi_ = std::make_unique<ViterbiDecoder>(decoding_model_, options);
        const int threads = resolve_threads(settings_.threads);
        if (threads > 1 && posterior_) pool_ = std::make_unique<TaskPool>(threads);
        if (settings_.columns.empty()) {
            for (size_t r = 0; r < model_.region_names.size(); ++r)
                if (model_.region_report[r]) columns_.push_back(static_cast<int>(r));
        } else {
            for (const auto& name : settings_.columns) {
                const auto at =
                    std::find(model_.region_names.begin(), model_.region_names.end(), name);
                if (at == model_.region_names.end()) {
                    std::string known;
                    for (const auto& r : model_.region_names)
                        known += (known.empty() ? "" : ", ") + r;
                    throw UsageError("profile '" + model_.name + "' has no region type '" + name +
                                     "' (its regions: " + known + ")");
                }
                columns_.push_back(static_cast<int>(at - model_.region_names.begin()));
            }
        }
        for (int c : columns_) column_names_.push_back(model_.region_names[static_cast<size_t>(c)]);
    }

    struct Result {
        std::string name;
        int64_t offset = 0, length = 0, full_length = 0, soft_masked = 0, unknown = 0;
        double log_likelihood = 0;
        std::vector<Call> calls;
        Buffer<double> posterior64;
        Buffer<float> posterior32;
        Buffer<int16_t> path;
    };

    /// Decodes one contig; call without the GIL.
    Result run(const Contig& contig) {
        Result r;
        const std::vector<int> no_columns;
        const std::vector<int>& columns = settings_.posteriors ? columns_ : no_columns;
        const size_t cells = static_cast<size_t>(contig.length) * columns.size();
        std::unique_ptr<DecodeSink> array;
        if (settings_.mode == DecodeMode::viterbi)
            r.path = allocate<int16_t>(static_cast<size_t>(contig.length));
        int16_t* path = r.path.get();
        if (!settings_.posteriors && !path) {
            // calls only
        } else if (settings_.float32) {
            r.posterior32 = allocate<float>(cells);
            array = std::make_unique<ArraySink<float>>(model_, columns, r.posterior32.get(), path);
        } else {
            r.posterior64 = allocate<double>(cells);
            array = std::make_unique<ArraySink<double>>(model_, columns, r.posterior64.get(), path);
        }
        std::vector<PageCommitter::Span> spans;
        if (r.posterior64) spans.push_back({r.posterior64.get(), cells * sizeof(double)});
        if (r.posterior32) spans.push_back({r.posterior32.get(), cells * sizeof(float)});
        if (r.path)
            spans.push_back({r.path.get(), static_cast<size_t>(contig.length) * sizeof(int16_t)});
        const PageCommitter committer(std::move(spans));  // ends before r's buffers could be freed
        IntervalCaller caller(model_, call_options_);
        SinkFanout sinks(array ? std::vector<DecodeSink*>{array.get(), &caller}
                               : std::vector<DecodeSink*>{&caller});
        DecodeResult result;
        if (decoding_model_.window > 0) {
            WindowExpander bases(decoding_model_, sinks);
            result = posterior_ ? posterior_->run(contig, bases, pool_.get())
                                : viterbi_->run(contig, bases);
        } else {
            result = posterior_ ? posterior_->run(contig, sinks, pool_.get())
                                : viterbi_->run(contig, sinks);
        }
        r.name = contig.name;
        r.offset = contig.offset;
        r.length = contig.length;
        r.full_length = contig.full_length();
        r.soft_masked = contig.soft_masked;
        r.unknown = contig.unknown_count();
        r.log_likelihood = result.log_likelihood;
        r.calls = caller.calls();
        return r;
    }

    const DecodeSettings& settings() const { return settings_; }
    const Model& model() const { return model_; }
    const std::vector<std::string>& column_names() const { return column_names_; }

private:
    DecodeSettings settings_;
    Model decoding_model_;
    Model model_;
    CallOptions call_options_;
    std::unique_ptr<PosteriorDecoder> posterior_;
    std::unique_ptr<ViterbiDecoder> viterbi_;
    std::unique_ptr<TaskPool> pool_;
    std::vector<int> columns_;
    std::vector<std::string> column_names_;
};

/// numpy array over a buffer it takes ownership of (freed with the array).
template <class T>
py::array adopt(Buffer<T> data, std::vector<py::ssize_t> shape) {
    T* raw = data.release();
    py::capsule owner(raw, [](void* p) { std::free(p); });
    return py::array_t<T>(shape, raw, owner);
}

/// One decoded contig as Python sees it (tidemark.Decoding wraps it).
struct Decoded {
    std::string name;
    int64_t offset = 0, length = 0, full_length = 0, soft_masked = 0, unknown = 0;
    double log_likelihood = 0;
    std::string mode;
    std::vector<std::string> columns;
    py::object posteriors, path;
    std::vector<Call> calls;
    std::shared_ptr<Engine> engine;  ///< keeps the model the calls refer to
};

Decoded to_python(Engine::Result r, const std::shared_ptr<Engine>& engine) {
    Decoded d;
    d.name = r.name;
    d.offset = r.offset;
    d.length = r.length;
    d.full_length = r.full_length;
    d.soft_masked = r.soft_masked;
    d.unknown = r.unknown;
    d.log_likelihood = r.log_likelihood;
    d.mode = engine->settings().mode == DecodeMode::posterior ? "posterior" : "viterbi";
    d.columns = engine->column_names();
    const std::vector<py::ssize_t> shape{static_cast<py::ssize_t>(r.length),
                                         static_cast<py::ssize_t>(d.columns.size())};
    if (!engine->settings().posteriors)
        d.posteriors = py::none();
    else if (r.posterior32)
        d.posteriors = adopt(std::move(r.posterior32), shape);
    else
        d.posteriors = adopt(std::move(r.posterior64), shape);
    d.path = r.path ? py::object(adopt(std::move(r.path), {static_cast<py::ssize_t>(r.length)}))
                    : py::none();
    d.calls = std::move(r.calls);
    d.engine = engine;
    return d;
}

DecodeMode parse_mode(const std::string& method) {
    if (method == "posterior") return DecodeMode::posterior;
    if (method == "viterbi") return DecodeMode::viterbi;
    throw UsageError("method must be 'posterior' or 'viterbi', not '" + method + "'");
}

DecodeSettings make_settings(const py::object& profile, const std::string& method,
                             const std::vector<std::string>& region_types, const std::string& dtype,
                             bool posteriors, int threads, const std::string& soft_masked,
                             std::optional<double> min_posterior, std::optional<int64_t> merge_gap,
                             std::optional<int64_t> min_length, double high_posterior,
                             const std::string& criteria, int64_t block_size) {
    DecodeSettings s;
    s.profile = to_profile(profile);
    s.mode = parse_mode(method);
    s.columns = region_types;
    if (dtype != "float64" && dtype != "float32")
        throw UsageError("dtype must be 'float64' or 'float32', not '" + dtype + "'");
    s.float32 = dtype == "float32";
    s.posteriors = posteriors;
    s.threads = threads;
    s.soft_masked = parse_soft_masked(soft_masked);
    s.calling.min_posterior = min_posterior;
    s.calling.merge_gap = merge_gap;
    s.calling.min_length = min_length;
    s.calling.high_posterior = high_posterior;
    s.calling.criteria = parse_island_criteria(criteria);
    s.block_size = block_size;
    return s;
}

std::string_view text_of(const py::object& sequence) {
    if (py::isinstance<py::bytes>(sequence)) {
        char* data = nullptr;
        py::ssize_t size = 0;
        if (PyBytes_AsStringAndSize(sequence.ptr(), &data, &size) != 0)
            throw py::error_already_set();
        return {data, static_cast<size_t>(size)};
    }
    if (py::isinstance<py::str>(sequence)) {
        py::ssize_t size = 0;
        const char* data = PyUnicode_AsUTF8AndSize(sequence.ptr(), &size);
        if (!data) throw py::error_already_set();
        return {data, static_cast<size_t>(size)};
    }
    throw py::type_error("sequence must be str or bytes");
}

/// Records of a FASTA file (or regions of an indexed one), decoded one at a time.
class RecordIterator {
public:
    RecordIterator(std::shared_ptr<Engine> engine, const std::string& path,
                   const std::vector<std::string>& regions)
        : engine_(std::move(engine)) {
        py::gil_scoped_release unlocked;
        if (regions.empty()) {
            source_ = open_fasta(path);
        } else {
            source_ = open_regions(path, resolve_regions(path, regions, {}));
        }
        source_->set_soft_masked(engine_->settings().soft_masked);
    }
    Decoded next() {
        if (!source_) throw py::stop_iteration();
        Engine::Result r;
        {
            py::gil_scoped_release unlocked;
            if (!source_->next(contig_)) {
                source_.reset();
                contig_ = Contig();
            } else {
                r = engine_->run(contig_);
            }
        }
        if (!source_) throw py::stop_iteration();
        return to_python(std::move(r), engine_);
    }

private:
    std::shared_ptr<Engine> engine_;
    std::unique_ptr<SequenceSource> source_;
    Contig contig_;
};

/// The bases of one region of an indexed FASTA file as text (A, C, G, T, N for unknown bases).
std::string region_text(const std::string& path, const std::string& region) {
    py::gil_scoped_release unlocked;
    const auto source = open_regions(path, resolve_regions(path, {region}, {}));
    Contig contig;
    source->next(contig);
    std::string text(static_cast<size_t>(contig.length), 'N');
    std::vector<uint8_t> codes(size_t{1} << 16);
    for (int64_t at = 0; at < contig.length; at += static_cast<int64_t>(codes.size())) {
        const int64_t n = std::min<int64_t>(static_cast<int64_t>(codes.size()), contig.length - at);
        contig.unpack(at, n, codes.data());
        for (int64_t i = 0; i < n; ++i)
            text[static_cast<size_t>(at + i)] = "ACGTN"[codes[static_cast<size_t>(i)]];
    }
    return text;
}

py::tuple call_tuple(const Decoded& d, const Call& c) {
    const Model& m = d.engine->model();
    const auto or_none = [](double x) {
        return std::isnan(x) ? py::object(py::none()) : py::object(py::float_(x));
    };
    return py::make_tuple(d.name, d.offset + c.begin, d.offset + c.end,
                          m.region_names[static_cast<size_t>(c.region)], c.mean_posterior,
                          c.min_posterior, d.offset + c.core_begin, d.offset + c.core_end,
                          c.composition.gc_fraction(), or_none(c.composition.cpg_obs_exp()),
                          or_none(c.signature_distance));
}

std::string bed_text(const Decoded& d, const std::string& style) {
    BedStyle bed_style = BedStyle::plain;
    if (style == "browser")
        bed_style = BedStyle::browser;
    else if (style != "plain")
        throw UsageError("style must be 'plain' or 'browser', not '" + style + "'");
    Contig where;  // the calls' coordinates need only the name and offset
    where.name = d.name;
    where.offset = d.offset;
    std::string out;
    for (const Call& c : d.calls) out += format_bed_line(bed_style, d.engine->model(), where, c);
    return out;
}

// ---------------------------------------------------------------------------------------------
// Fit, simulate, compare

Logger logger(bool verbose) {
    return Logger(verbose ? LogLevel::normal : LogLevel::quiet);
}

std::shared_ptr<Profile> fit(const std::vector<std::string>& inputs, const py::object& profile,
                             const py::object& classes, int order,
                             const std::optional<std::string>& select, bool init_from_data,
                             int64_t init_window, const std::optional<std::string>& labels,
                             const std::optional<std::string>& default_region,
                             const std::optional<std::string>& name, double pseudocount,
                             int max_iter, double tol, uint64_t seed, int restarts,
                             double perturbation, const std::vector<std::string>& freeze,
                             bool order_by_gc, int threads, const std::vector<std::string>& regions,
                             const std::string& soft_masked, int64_t block_size, bool verbose) {
    FitJobOptions o;
    o.inputs = inputs;
    o.regions = regions;
    o.soft_masked = parse_soft_masked(soft_masked);
    std::optional<Profile> given;
    if (!profile.is_none()) {
        if (py::isinstance<Profile>(profile)) {
            // run_fit loads its start by name or path: hand an in-memory profile over as a file.
            given = profile.cast<Profile>();
        } else {
            o.profile = profile.cast<std::string>();
        }
    }
    if (!classes.is_none())
        parse_class_range(py::str(classes).cast<std::string>(), o.classes_min, o.classes_max);
    o.order = order;
    o.select = select.value_or("");
    o.init_from_data = init_from_data;
    o.seed.window = init_window;
    o.labels = labels.value_or("");
    o.default_region = default_region.value_or("");
    o.output = "";  // the profile comes back to Python
    o.name = name.value_or("");
    o.fit.pseudocount = pseudocount;
    o.fit.max_iter = max_iter;
    o.fit.tol = tol;
    o.fit.seed = seed;
    o.fit.restarts = restarts;
    o.fit.perturbation = perturbation;
    for (const auto& word : freeze) parse_freeze(word, o.fit.freeze);
    o.fit.order_by_gc = order_by_gc;
    o.fit.threads = threads;
    o.fit.block_size = block_size;
    o.command_line = "tidemark.fit (Python)";
    py::object keep;  // the temporary file of an in-memory start profile
    if (given) {
        keep = py::module_::import("tempfile")
                   .attr("NamedTemporaryFile")("w", py::arg("suffix") = ".json",
                                               py::arg("delete") = false);
        keep.attr("write")(to_json(*given));
        keep.attr("close")();
        o.profile = keep.attr("name").cast<std::string>();
    }
    FitResult result;
    try {
        py::gil_scoped_release unlocked;
        result = run_fit(o, logger(verbose));
    } catch (...) {
        if (given) py::module_::import("os").attr("unlink")(keep.attr("name"));
        throw;
    }
    if (given) py::module_::import("os").attr("unlink")(keep.attr("name"));
    return std::make_shared<Profile>(std::move(result.profile));
}

/// FASTA text and truth BED of a simulation, formatted as `tidemark simulate` writes them.
py::tuple simulate_text(const py::object& profile, const std::vector<int64_t>& lengths,
                        uint64_t seed, double gap_fraction, double gap_mean_length,
                        const std::string& name_prefix, int line_width) {
    SimulateOptions o;
    o.lengths = lengths;
    o.seed = seed;
    o.gap_fraction = gap_fraction;
    o.gap_mean_length = gap_mean_length;
    o.name_prefix = name_prefix;
    validate(o);
    if (line_width < 0) throw UsageError("line_width must be >= 0 (0 = one line per contig)");
    const auto p = to_profile(profile);
    std::string fasta, truth;
    {
        py::gil_scoped_release unlocked;
        const Model model = compile(*p);
        FastaFormatter fasta_out([&fasta](std::string_view s) { fasta.append(s); }, line_width);
        TruthFormatter truth_out([&truth](std::string_view s) { truth.append(s); }, model);
        struct Both final : SimulationSink {
            SimulationSink &a, &b;
            Both(SimulationSink& x, SimulationSink& y) : a(x), b(y) {}
            void begin_contig(const std::string& n, int64_t l) override {
                a.begin_contig(n, l);
                b.begin_contig(n, l);
            }
            void block(const SimulatedBlock& blk) override {
                a.block(blk);
                b.block(blk);
            }
            void end_contig() override {
                a.end_contig();
                b.end_contig();
            }
        } both(fasta_out, truth_out);
        simulate(model, o, both);
    }
    return py::make_tuple(py::bytes(fasta), py::bytes(truth));
}

std::string compare(const std::string& calls, const std::string& truth,
                    const std::optional<std::string>& genome,
                    const std::optional<std::string>& name, const std::vector<std::string>& types) {
    py::gil_scoped_release unlocked;
    CompareOptions options;
    options.name = name.value_or("");
    options.types = types;
    std::optional<Genome> g;
    if (genome) g = read_genome(*genome);
    const Comparison c = compare_intervals(IntervalSet{calls, read_bed(calls)},
                                           IntervalSet{truth, read_bed(truth)}, options, g);
    return compare_json(c, "tidemark.compare (Python)");
}

}  // namespace
}  // namespace tidemark::python

PYBIND11_MODULE(_tidemark, m) {
    using namespace tidemark;
    using namespace tidemark::python;
    m.doc() = "tidemark's engine (use the tidemark package, which wraps this module)";
    m.attr("__version__") = TIDEMARK_VERSION;

    // Exceptions: classes defined by the package (tidemark/__init__.py registers them), so that
    // they can derive from ValueError or OSError as well as tidemark.Error.
    m.attr("_errors") = py::dict();
    py::register_exception_translator([](std::exception_ptr p) {
        const auto raise = [](const char* kind, const std::exception& e) {
            const py::dict classes = py::module_::import("tidemark._tidemark").attr("_errors");
            const py::object cls = classes.contains(kind) ? classes[kind] : py::object();
            PyErr_SetString(cls ? cls.ptr() : PyExc_RuntimeError, e.what());
        };
        try {
            if (p) std::rethrow_exception(p);
        } catch (const UsageError& e) {
            raise("UsageError", e);
        } catch (const IoError& e) {
            raise("IoError", e);
        } catch (const ProfileError& e) {
            raise("ProfileError", e);
        } catch (const InputError& e) {
            raise("InputError", e);
        } catch (const InternalError& e) {
            raise("InternalError", e);
        } catch (const Error& e) {
            raise("Error", e);
        }
    });

    py::class_<Profile, std::shared_ptr<Profile>>(m, "Profile")
        .def_static(
            "load", [](const std::string& name_or_path) { return load_profile(name_or_path); },
            py::arg("name_or_path"))
        .def_static("from_json", &parse_profile, py::arg("text"), py::arg("origin") = "<string>")
        .def_readonly("name", &Profile::name)
        .def_readonly("description", &Profile::description)
        .def_readonly("sources", &Profile::sources)
        .def_readonly("window_size", &Profile::window_size)
        .def_readonly("is_template", &Profile::is_template)
        .def_readonly("_provenance", &Profile::provenance_json)
        .def_property_readonly("regions", &regions_of)
        .def_property_readonly("states", &states_of)
        .def_property_readonly(
            "initial", [](const Profile& p) { return py::array_t<double>(py::cast(p.initial)); })
        .def_property_readonly("transitions", &transitions_of)
        .def_property_readonly("calling",
                               [](const Profile& p) {
                                   py::dict d;
                                   d["min_posterior"] = p.calling.min_posterior;
                                   d["min_length"] = p.calling.min_length;
                                   d["merge_gap"] = p.calling.merge_gap;
                                   return d;
                               })
        .def_property_readonly("checksum", &profile_checksum)
        .def("to_json", &to_json)
        .def("save", &save_profile, py::arg("path"))
        .def("__repr__", [](const Profile& p) {
            return "<tidemark.Profile '" + p.name + "': " + std::to_string(p.states.size()) +
                   " states, " + std::to_string(p.regions.size()) + " regions>";
        });
    m.def("builtin_profiles", [] {
        std::vector<std::string> names;
        for (const auto& b : builtin_profiles()) names.emplace_back(b.name);
        return names;
    });

    py::class_<Decoded>(m, "_Decoded")
        .def_readonly("name", &Decoded::name)
        .def_readonly("offset", &Decoded::offset)
        .def_readonly("length", &Decoded::length)
        .def_readonly("full_length", &Decoded::full_length)
        .def_readonly("soft_masked", &Decoded::soft_masked)
        .def_readonly("unknown", &Decoded::unknown)
        .def_readonly("log_likelihood", &Decoded::log_likelihood)
        .def_readonly("method", &Decoded::mode)
        .def_readonly("region_types", &Decoded::columns)
        .def_readonly("posteriors", &Decoded::posteriors)
        .def_readonly("path", &Decoded::path)
        .def_property_readonly("path_regions",
                               [](const Decoded& d) { return d.engine->model().region_names; })
        .def("_call_tuples",
             [](const Decoded& d) {
                 py::list out;
                 for (const Call& c : d.calls) out.append(call_tuple(d, c));
                 return out;
             })
        .def("bed", &bed_text, py::arg("style") = "plain");

    py::class_<Engine, std::shared_ptr<Engine>>(m, "_Engine");
    py::class_<RecordIterator>(m, "_Records")
        .def("__iter__", [](RecordIterator& it) -> RecordIterator& { return it; })
        .def("__next__", &RecordIterator::next);

    const auto engine_of =
        [](const py::object& profile, const std::string& method,
           const std::vector<std::string>& region_types, const std::string& dtype, bool posteriors,
           int threads, const std::string& soft_masked, std::optional<double> min_posterior,
           std::optional<int64_t> merge_gap, std::optional<int64_t> min_length,
           double high_posterior, const std::string& criteria, int64_t block_size) {
            return std::make_shared<Engine>(make_settings(
                profile, method, region_types, dtype, posteriors, threads, soft_masked,
                min_posterior, merge_gap, min_length, high_posterior, criteria, block_size));
        };
    m.def("_engine", engine_of, py::arg("profile"), py::arg("method"), py::arg("region_types"),
          py::arg("dtype"), py::arg("posteriors"), py::arg("threads"), py::arg("soft_masked"),
          py::arg("min_posterior"), py::arg("merge_gap"), py::arg("min_length"),
          py::arg("high_posterior"), py::arg("criteria"), py::arg("block_size"));
    m.def(
        "_decode_text",
        [](const std::shared_ptr<Engine>& engine, const py::object& sequence,
           const std::string& name) {
            const std::string_view text = text_of(sequence);
            Engine::Result r;
            {
                py::gil_scoped_release unlocked;
                Contig contig;
                contig.name = name;
                contig_from_text(text, contig, engine->settings().soft_masked);
                r = engine->run(contig);
            }
            return to_python(std::move(r), engine);
        },
        py::arg("engine"), py::arg("sequence"), py::arg("name"));
    m.def(
        "_records",
        [](const std::shared_ptr<Engine>& engine, const std::string& path,
           const std::vector<std::string>& regions) {
            return std::make_unique<RecordIterator>(engine, path, regions);
        },
        py::arg("engine"), py::arg("path"), py::arg("regions"));

    m.def("_region_text", &region_text, py::arg("path"), py::arg("region"));
    m.def("_fit", &fit, py::arg("inputs"), py::arg("profile"), py::arg("classes"), py::arg("order"),
          py::arg("select"), py::arg("init_from_data"), py::arg("init_window"), py::arg("labels"),
          py::arg("default_region"), py::arg("name"), py::arg("pseudocount"), py::arg("max_iter"),
          py::arg("tol"), py::arg("seed"), py::arg("restarts"), py::arg("perturbation"),
          py::arg("freeze"), py::arg("order_by_gc"), py::arg("threads"), py::arg("regions"),
          py::arg("soft_masked"), py::arg("block_size"), py::arg("verbose"));
    m.def("_simulate", &simulate_text, py::arg("profile"), py::arg("lengths"), py::arg("seed"),
          py::arg("gap_fraction"), py::arg("gap_mean_length"), py::arg("name_prefix"),
          py::arg("line_width"));
    m.def("_compare", &compare, py::arg("calls"), py::arg("truth"), py::arg("genome"),
          py::arg("name"), py::arg("types"));
}
