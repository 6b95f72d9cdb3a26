// Talk on stderr: one levelled logger passed to whoever needs to report (stdout stays data).
#pragma once

#include <cstddef>
#include <cstdio>
#include <string>
#include <string_view>
#include <vector>

namespace tidemark {

enum class LogLevel { quiet = 0, normal = 1, verbose = 2 };

class Logger {
public:
    explicit Logger(LogLevel level = LogLevel::normal, std::FILE* out = stderr)
        : level_(level), out_(out) {}
    LogLevel level() const { return level_; }
    /// Warnings are printed at every level and the first kept_warnings kept (all are counted),
    /// so that a run's documents can list them (the HTML report's box). Called from the thread
    /// that runs the job, not from workers.
    void warn(std::string_view msg) const {
        if (warnings_.size() < kept_warnings) warnings_.emplace_back(msg);
        ++warning_count_;
        write(LogLevel::quiet, "tidemark: warning: ", msg);
    }
    static constexpr size_t kept_warnings = 100;
    const std::vector<std::string>& warnings() const { return warnings_; }
    size_t warning_count() const { return warning_count_; }
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
    mutable std::vector<std::string> warnings_;
    mutable size_t warning_count_ = 0;
};

}  // namespace tidemark
