// tidemark entry point: builds the command line, runs the chosen subcommand, maps errors to
// documented exit codes (0 ok, 1 input, 2 usage, 3 output, 4 internal).
#include <htslib/hts.h>

#include <cstdio>
#include <exception>

#include "commands.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"

namespace {

std::string quote_word(const std::string& w) {
    if (!w.empty() && w.find_first_of(" \t'\"$\\") == std::string::npos) return w;
    std::string q = "'";
    for (char c : w) q += (c == '\'') ? std::string("'\\''") : std::string(1, c);
    return q + "'";
}

}  // namespace

int main(int argc, char** argv) {
    using namespace tidemark;
    install_output_signal_handlers();
    hts_set_log_level(HTS_LOG_OFF);  // tidemark reports htslib failures in its own words
    cli::Context ctx;
    for (int i = 0; i < argc; ++i) ctx.command_line += (i ? " " : "") + quote_word(argv[i]);

    CLI::App app{"tidemark " TIDEMARK_VERSION
                 ": find regions of distinct base composition (CpG islands, GC-rich and AT-rich "
                 "domains) in assembled genomes by exact posterior decoding of region-type HMMs."};
    app.set_version_flag("--version", std::string("tidemark ") + TIDEMARK_VERSION);
    app.require_subcommand(1);
    cli::add_scan(app, ctx);
    cli::add_profiles(app, ctx);
    cli::add_fit(app, ctx);
    cli::add_simulate(app, ctx);
    cli::add_compare(app, ctx);
    cli::add_merge(app, ctx);
    cli::add_docs(app, ctx);
    // One handler for everything: option callbacks may throw tidemark errors while parsing.
    try {
        app.parse(argc, argv);
        return ctx.action ? ctx.action() : 0;
    } catch (const CLI::CallForHelp& e) {
        return app.exit(e);
    } catch (const CLI::CallForAllHelp& e) {
        return app.exit(e);
    } catch (const CLI::CallForVersion& e) {
        return app.exit(e);
    } catch (const CLI::ParseError& e) {
        std::fprintf(stderr, "tidemark: usage error: %s\n(%s)\n",
                     cli::explain_usage_error(app, e, argc, argv).c_str(),
                     cli::help_hint(app).c_str());
        return static_cast<int>(ExitCode::usage);
    } catch (const UsageError& e) {  // a mistake found after parsing: worded as the ones above
        std::fflush(stdout);
        std::fprintf(stderr, "tidemark: usage error: %s\n", e.what());
        return static_cast<int>(ExitCode::usage);
    } catch (const Error& e) {
        std::fflush(stdout);
        std::fprintf(stderr, "tidemark: error: %s\n", e.what());
        return static_cast<int>(e.exit_code());
    } catch (const std::bad_alloc&) {
        std::fprintf(stderr, "tidemark: error: out of memory\n");
        return static_cast<int>(ExitCode::internal);
    } catch (const std::exception& e) {
        std::fprintf(stderr, "tidemark: internal error: %s (please report this)\n", e.what());
        return static_cast<int>(ExitCode::internal);
    }
}
