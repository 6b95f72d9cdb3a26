// Talk on stderr: one levelled logger passed to whoever needs to report (stdout stays data).
#pragma once

#include <cstdio>
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

}  // namespace tidemark
