// Subcommand registration: each src/cli/<name>.cpp adds one subcommand to the application.
#pragma once

#include <CLI/CLI.hpp>
#include <functional>
#include <string>

namespace tidemark::cli {

/// Work to run after parsing; returns the process exit code.
using Action = std::function<int()>;

/// Shared state of one invocation.
struct Context {
    std::string command_line;  ///< the words the user typed, for headers and reports
    Action action;             ///< set by the chosen subcommand's callback
};

void add_scan(CLI::App& app, Context& ctx);
void add_profiles(CLI::App& app, Context& ctx);
void add_fit(CLI::App& app, Context& ctx);
void add_simulate(CLI::App& app, Context& ctx);
void add_compare(CLI::App& app, Context& ctx);
void add_merge(CLI::App& app, Context& ctx);
/// A parse error in tidemark's words: the wrong word named, the closest subcommand, option or
/// value suggested.
std::string explain_usage_error(const CLI::App& app, const CLI::ParseError& e, int argc,
                                char** argv);
/// Where to look next: 'tidemark --help' or 'tidemark SUBCOMMAND --help'.
std::string help_hint(const CLI::App& app);

/// Hidden `_generate man|bash-completion`: documentation made from the options above.
void add_docs(CLI::App& app, Context& ctx);

}  // namespace tidemark::cli
