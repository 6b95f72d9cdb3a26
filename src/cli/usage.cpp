// Usage errors in tidemark's words: CLI11's parse errors rewritten to name the word that was
// wrong and, for a typo, the closest subcommand, option or value.
#include <fmt/format.h>

#include <algorithm>

#include "commands.hpp"
#include "tidemark/suggest.hpp"

namespace tidemark::cli {
namespace {

std::vector<const CLI::App*> visible_subcommands(const CLI::App& app) {
    return app.get_subcommands([](const CLI::App* s) { return !s->get_group().empty(); });
}

std::vector<std::string> subcommand_names(const CLI::App& app) {
    std::vector<std::string> out;
    for (const CLI::App* s : visible_subcommands(app)) out.push_back(s->get_name());
    return out;
}

std::vector<std::string> option_spellings(const CLI::App& app) {
    std::vector<std::string> out;
    for (const CLI::Option* o : app.get_options()) {
        for (const auto& s : o->get_snames()) out.push_back("-" + s);
        for (const auto& l : o->get_lnames()) out.push_back("--" + l);
    }
    return out;
}

std::string list(const std::vector<std::string>& words) {
    std::string out;
    for (const auto& w : words) out += (out.empty() ? "" : ", ") + w;
    return out;
}

std::string path_of(const CLI::App& app) {
    std::string path;
    for (const CLI::App* a = &app; a; a = a->get_parent())
        path = (a->get_parent() ? a->get_name() : "tidemark") + (path.empty() ? "" : " " + path);
    return path;
}

// The subcommands (at any depth) that define an option spelled `word`.
std::vector<std::string> owners_of(const CLI::App& app, const std::string& word) {
    std::vector<std::string> out;
    for (const CLI::App* s : visible_subcommands(app)) {
        const auto spellings = option_spellings(*s);
        if (std::find(spellings.begin(), spellings.end(), word) != spellings.end())
            out.push_back(path_of(*s));
        for (const auto& deeper : owners_of(*s, word)) out.push_back(deeper);
    }
    return out;
}

const CLI::App& deepest_parsed(const CLI::App& app) {
    for (const CLI::App* s : app.get_subcommands())
        if (s->parsed()) return deepest_parsed(*s);
    return app;
}

// An option word without an attached value: --threads=2 -> --threads.
std::string option_word(const std::string& arg) {
    const size_t eq = arg.find('=');
    return arg.rfind("--", 0) == 0 && eq != std::string::npos ? arg.substr(0, eq) : arg;
}

std::string unknown_option(const CLI::App& root, const CLI::App& at, const std::string& arg) {
    const std::string word = option_word(arg);
    const std::string where = path_of(at);
    std::string msg = fmt::format("unknown option '{}' for '{}'", word, where);
    const std::string suggestion = did_you_mean(word, option_spellings(at));
    if (!suggestion.empty()) return msg + suggestion;
    const auto owners = owners_of(root, word);
    if (!owners.empty()) return msg + fmt::format(" ({} is an option of {})", word, list(owners));
    return msg;
}

std::string unknown_subcommand(const CLI::App& at, const std::string& word) {
    const auto names = subcommand_names(at);
    std::string msg = fmt::format("unknown subcommand '{}'", word);
    if (at.get_parent()) msg = fmt::format("unknown subcommand '{}' of '{}'", word, path_of(at));
    return msg + did_you_mean(word, names) + fmt::format(" (subcommands: {})", list(names));
}

// The option or positional a CLI11 message begins with ("--threads: ..." or "fasta is required").
const CLI::Option* option_named(const CLI::App& at, const std::string& name) {
    for (const CLI::Option* o : at.get_options())
        if (o->check_name(name) || o->get_name(true) == name) return o;
    return nullptr;
}

std::string value_kind(const CLI::Option& o) {
    const std::string type = o.get_type_name();
    if (type.rfind("INT", 0) == 0 || type.rfind("UINT", 0) == 0) return "a whole number";
    if (type.rfind("FLOAT", 0) == 0) return "a number";
    return "a " + type;
}

std::string first_name(const CLI::Option& o) {
    if (!o.get_lnames().empty()) return "--" + o.get_lnames().front();
    if (!o.get_snames().empty()) return "-" + o.get_snames().front();
    return o.get_name(true);
}

}  // namespace

std::string explain_usage_error(const CLI::App& app, const CLI::ParseError& e, int argc,
                                char** argv) {
    // By type: CLI11 names some errors after the subcommand that raised them.
    const auto is = [&e](auto* type) { return dynamic_cast<decltype(type)>(&e) != nullptr; };
    const bool extras_error = is(static_cast<const CLI::ExtrasError*>(nullptr));
    const bool required_error = is(static_cast<const CLI::RequiredError*>(nullptr));
    const std::string what = e.what();
    const CLI::App& at = deepest_parsed(app);
    std::vector<std::string> args(argv + 1, argv + argc);

    if (&at == &app && (required_error || extras_error)) {
        const auto names = subcommand_names(app);
        // A subcommand after options: the options are the subcommand's, they go after it.
        for (size_t i = 0; i < args.size(); ++i)
            if (std::find(names.begin(), names.end(), args[i]) != names.end() && i > 0)
                return fmt::format(
                    "'{}' comes before the subcommand; options go after it: 'tidemark {} {} ...'",
                    args[0], args[i], args[0]);
        if (!args.empty() && args[0].size() > 1 && args[0][0] == '-')
            return unknown_option(app, app, args[0]) + "; options go after a subcommand";
        if (!args.empty()) return unknown_subcommand(app, args[0]);
        return fmt::format("a subcommand is required: {}", list(names));
    }
    const size_t colon = what.find(':');
    if (extras_error) {
        // "The following arguments were not expected: x y": the words, taken in command-line order.
        std::vector<std::string> listed, extras;
        if (colon != std::string::npos) {
            std::string word;
            for (char c : what.substr(colon + 1) + " ") {
                if (c != ' ') {
                    word += c;
                } else if (!word.empty()) {
                    listed.push_back(word);
                    word.clear();
                }
            }
        }
        for (const auto& a : args)
            if (std::find(listed.begin(), listed.end(), a) != listed.end()) extras.push_back(a);
        // Where the subcommand is named: options before it belong to no subcommand.
        const auto named_at = std::find(args.begin(), args.end(), at.get_name()) - args.begin();
        for (const auto& x : extras) {
            if (x.size() < 2 || x[0] != '-' || std::isdigit(static_cast<unsigned char>(x[1])) ||
                x[1] == '.')
                continue;
            if (std::find(args.begin(), args.end(), x) - args.begin() < named_at)
                return fmt::format(
                    "'{}' comes before the subcommand; options go after it: '{} {} ...'", x,
                    path_of(at), x);
            return unknown_option(app, at, x);
        }
        if (!extras.empty()) {
            if (!visible_subcommands(at).empty()) return unknown_subcommand(at, extras.front());
            return fmt::format(
                "unexpected argument '{}' for '{}' (run '{} --help' for what it takes)",
                extras.front(), path_of(at), path_of(at));
        }
    }
    if (required_error) {
        const std::string suffix = " is required";
        if (what.size() > suffix.size() &&
            what.compare(what.size() - suffix.size(), suffix.size(), suffix) == 0) {
            const std::string name = what.substr(0, what.size() - suffix.size());
            if (const CLI::Option* o = option_named(at, name))
                return fmt::format("'{}' needs {} ({})", path_of(at),
                                   o->get_positional() ? name : first_name(*o),
                                   o->get_description());
        }
    }
    if (is(static_cast<const CLI::ArgumentMismatch*>(nullptr)) && colon != std::string::npos) {
        if (const CLI::Option* o = option_named(at, what.substr(0, colon)))
            return fmt::format("{} needs a value: {}", first_name(*o), o->get_description());
    }
    if (is(static_cast<const CLI::ConversionError*>(nullptr))) {
        // "Could not convert: --threads = x"
        const size_t eq = what.find(" = ");
        if (colon != std::string::npos && eq != std::string::npos && eq > colon + 2) {
            const std::string name = what.substr(colon + 2, eq - colon - 2),
                              value = what.substr(eq + 3);
            if (const CLI::Option* o = option_named(at, name))
                return fmt::format("{}: '{}' is not {}", first_name(*o), value, value_kind(*o));
        }
    }
    if (is(static_cast<const CLI::ValidationError*>(nullptr)) && colon != std::string::npos) {
        // CLI::IsMember: "--decode: fast not in {posterior,viterbi}"
        const size_t not_in = what.find(" not in {", colon);
        if (not_in != std::string::npos && what.back() == '}') {
            const std::string value = what.substr(colon + 2, not_in - colon - 2);
            std::vector<std::string> allowed;
            std::string word;
            for (char c : what.substr(not_in + 9, what.size() - not_in - 10)) {
                if (c == ',') {
                    allowed.push_back(word);
                    word.clear();
                } else {
                    word += c;
                }
            }
            allowed.push_back(word);
            return fmt::format("{}: '{}' is not one of {}{}", what.substr(0, colon), value,
                               list(allowed), did_you_mean(value, allowed));
        }
    }
    return what;
}

std::string help_hint(const CLI::App& app) {
    const CLI::App& at = deepest_parsed(app);
    if (&at == &app) return "run 'tidemark --help' for the subcommands";
    return fmt::format("run '{} --help' for its options", path_of(at));
}

}  // namespace tidemark::cli
