// `tidemark profiles`: list the built-ins, print one, or validate a profile file.
#include <fmt/format.h>

#include "commands.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"

namespace tidemark::cli {

void add_profiles(CLI::App& app, Context& ctx) {
    CLI::App* cmd = app.add_subcommand("profiles", "List, print or check profiles");
    auto name = std::make_shared<std::string>();
    auto file = std::make_shared<std::string>();

    CLI::App* show = cmd->add_subcommand("show", "Print a profile's JSON (built-in name or file)");
    show->add_option("profile", *name, "built-in name or file")->required();
    CLI::App* check =
        cmd->add_subcommand("check", "Validate a profile file; prints a one-line summary");
    check->add_option("file", *file, "profile JSON file or built-in name")->required();

    cmd->callback([=, &ctx] {
        ctx.action = [=] {
            OutputFile out("-");
            if (show->parsed()) {
                out.write(to_json(load_profile(*name)));
            } else if (check->parsed()) {
                const Profile p = load_profile(*file);
                int reported = 0;
                for (const auto& r : p.regions) reported += r.report;
                out.write(fmt::format("{}: ok: profile '{}', {} states, {} regions ({} reported)\n",
                                      *file, p.name, p.states.size(), p.regions.size(), reported));
            } else {
                for (const auto& b : builtin_profiles()) {
                    const Profile p = parse_profile(b.json, std::string(b.name));
                    out.write(fmt::format("{:<16} {}\n", b.name, p.description));
                }
            }
            out.commit();
            return 0;
        };
    });
}

}  // namespace tidemark::cli
