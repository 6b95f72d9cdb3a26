// Talk on stderr: one levelled logger passed to whoever needs to report (stdout stays data).
#pragma once

#include <cstdint>
#include <cstdio>
#include <string>
#include <string_view>

namespace tidemark {

enum class LogLevel { quiet = 0, normal = 1, verbose = 2 };

class Logger {
public:
    explicit Logger(LogLevel level = LogLevel::normal, std::FILE* out = stderr)
        : level_(level), out_(out) {}
    LogLevel level() const { return level_; }
    void warn(std::string_view msg) const { write(LogLevel::quiet, "tidemark: warning: ", msg); }
    void info(std::string_view msg) const { write(LogLevel::normal, "tidemark: ", msg); }
    void detail(std::string_view msg) const { write(LogLevel::verbose, "tidemark: ", msg); }
    /// Text shown as is at verbose level (tables).
    void verbose_text(std::string_view text) const {
        if (level_ >= LogLevel::verbose) std::fwrite(text.data(), 1, text.size(), out_);
    }

private:
    void write(LogLevel at, std::string_view prefix, std::string_view msg) const {
        if (level_ < at) return;
        std::fprintf(out_, "%.*s%.*s\n", static_cast<int>(prefix.size()), prefix.data(),
                     static_cast<int>(msg.size()), msg.data());
    }
    LogLevel level_;
    std::FILE* out_;
};

/// A warning that can come once per record (millions of times): the first `listed` are
/// written, the rest only counted, and finish() writes one line with the count. Warnings are
/// shown at every level, -q included, so folding is what keeps -q short.
class RepeatedWarning {
public:
    /// `what`: the plural noun phrase the count line uses ("empty records").
    RepeatedWarning(const Logger& log, std::string what, int64_t listed = 5)
        : log_(log), what_(std::move(what)), listed_(listed) {}
    void warn(std::string_view msg) {
        if (count_++ < listed_) log_.warn(msg);
    }
    /// The count line, when some were not listed (once).
    void finish() {
        if (count_ > listed_)
            log_.warn(std::to_string(count_ - listed_) + " more " + what_ + " (" +
                      std::to_string(count_) + " in all; only the first " +
                      std::to_string(listed_) + " are listed)");
        count_ = 0;
    }

private:
    const Logger& log_;
    std::string what_;
    int64_t listed_;
    int64_t count_ = 0;
};

}  // namespace tidemark
