// `tidemark _generate man|bash-completion` (hidden): the man page and the bash completion script,
// written from the options the subcommands register, so that neither can drift from --help. The
// build runs it (CMakeLists.txt) and `cmake --install` installs the results.
#include <fmt/format.h>

#include <functional>
#include <map>

#include "commands.hpp"
#include "tidemark/error.hpp"
#include "tidemark/output.hpp"
#include "tidemark/profile.hpp"
#include "tidemark/track.hpp"

namespace tidemark::cli {
namespace {

// Subcommands a user sees: hidden ones (group "") are left out.
std::vector<const CLI::App*> visible_subcommands(const CLI::App& app) {
    return app.get_subcommands([](const CLI::App* s) { return !s->get_group().empty(); });
}

// Options a user sees, in registration order (help and version flags included).
std::vector<const CLI::Option*> visible_options(const CLI::App& app) {
    return app.get_options([](const CLI::Option* o) { return !o->get_group().empty(); });
}

// Flags have no type name and expect no items.
bool takes_value(const CLI::Option& o) {
    return o.get_items_expected_max() > 0 && !o.get_type_name().empty();
}

// The allowed values of an option checked with CLI::IsMember, whose type name reads TYPE:{a,b}.
std::vector<std::string> choices_of(const CLI::Option& o) {
    const std::string type = o.get_type_name();
    const size_t open = type.find(":{"), close = type.rfind('}');
    std::vector<std::string> out;
    if (open == std::string::npos || close == std::string::npos || close < open) return out;
    std::string word;
    for (char c : type.substr(open + 2, close - open - 2)) {
        if (c == ',') {
            out.push_back(word);
            word.clear();
        } else {
            word += c;
        }
    }
    if (!word.empty()) out.push_back(word);
    return out;
}

std::string plain_type(const CLI::Option& o) {
    const std::string type = o.get_type_name();
    return type.substr(0, type.find(':'));
}

// Every option spelling: -p, --profile.
std::vector<std::string> spellings(const CLI::Option& o) {
    std::vector<std::string> out;
    for (const auto& s : o.get_snames()) out.push_back("-" + s);
    for (const auto& l : o.get_lnames()) out.push_back("--" + l);
    return out;
}

// roff text: backslashes escaped, '-' as a minus sign (so that option names are neither
// hyphenated nor turned into typographic dashes), a control character at a line start escaped.
std::string roff(const std::string& text) {
    std::string out;
    for (char c : text) {
        if (c == '\\')
            out += "\\e";
        else if (c == '-')
            out += "\\-";
        else
            out += c;
        if (c == '\n') out += "\\&";
    }
    if (!out.empty() && (out[0] == '.' || out[0] == '\'')) out = "\\&" + out;
    return out;
}

// A footer of hard-wrapped prose: lines joined into paragraphs (a blank line separates them).
std::string roff_paragraphs(const std::string& text) {
    std::string out, paragraph;
    size_t at = 0;
    while (at <= text.size()) {
        size_t end = text.find('\n', at);
        if (end == std::string::npos) end = text.size();
        const std::string line = text.substr(at, end - at);
        if (line.find_first_not_of(" \t") == std::string::npos) {
            if (!paragraph.empty()) out += ".PP\n" + roff(paragraph) + "\n";
            paragraph.clear();
        } else {
            paragraph += (paragraph.empty() ? "" : " ") + line;
        }
        at = end + 1;
    }
    if (!paragraph.empty()) out += ".PP\n" + roff(paragraph) + "\n";
    return out;
}

std::string man_option(const CLI::Option& o) {
    std::string head;
    if (o.get_positional()) {
        head = "\\fI" + roff(o.get_name(true)) + "\\fR" +
               (o.get_items_expected_max() > 1 ? "..." : "");
    } else {
        for (const auto& s : spellings(o))
            head += (head.empty() ? "" : ", ") + ("\\fB" + roff(s) + "\\fR");
        if (takes_value(o)) {
            const auto choices = choices_of(o);
            std::string value;
            for (const auto& c : choices) value += (value.empty() ? "" : "|") + roff(c);
            head += " \\fI" + (choices.empty() ? roff(plain_type(o)) : value) + "\\fR";
        }
    }
    std::string text = o.get_description();
    if (!o.get_default_str().empty()) text += " [default: " + o.get_default_str() + "]";
    if (o.get_required()) text += " (required)";
    return ".TP\n" + head + "\n" + roff(text) + "\n";
}

std::string command_path(const CLI::App& app) {
    std::string path = app.get_name();
    for (const CLI::App* p = app.get_parent(); p; p = p->get_parent())
        path = (p->get_parent() ? p->get_name() : std::string("tidemark")) + " " + path;
    return path;
}

std::string synopsis_of(const CLI::App& sub) {
    std::string line = "\\fB" + roff(command_path(sub)) + "\\fR";
    if (!visible_subcommands(sub).empty()) line += " [\\fISUBCOMMAND\\fR]";
    bool options = false;
    for (const CLI::Option* o : visible_options(sub)) options = options || !o->get_positional();
    if (options) line += " [\\fIoptions\\fR]";
    for (const CLI::Option* o : visible_options(sub))
        if (o->get_positional()) {
            const std::string name = "\\fI" + roff(o->get_name(true)) + "\\fR" +
                                     (o->get_items_expected_max() > 1 ? "..." : "");
            line += " " + (o->get_required() ? name : "[" + name + "]");
        }
    return line;
}

std::string man_section(const CLI::App& sub) {
    std::string out = ".SS \"" + roff(command_path(sub)) + "\"\n" + synopsis_of(sub) + "\n.PP\n" +
                      roff(sub.get_description()) + "\n";
    // Positionals first, then options by group in the order the groups first appear.
    std::vector<std::string> groups;
    for (const CLI::Option* o : visible_options(sub)) {
        if (o->get_positional()) {
            out += man_option(*o);
            continue;
        }
        if (std::find(groups.begin(), groups.end(), o->get_group()) == groups.end())
            groups.push_back(o->get_group());
    }
    for (const auto& g : groups) {
        out += ".PP\n\\fI" + roff(g) + "\\fR\n";
        for (const CLI::Option* o : visible_options(sub))
            if (!o->get_positional() && o->get_group() == g) out += man_option(*o);
    }
    if (!sub.get_footer().empty()) out += roff_paragraphs(sub.get_footer());
    for (const CLI::App* s : visible_subcommands(sub)) out += man_section(*s);
    return out;
}

std::string man_page(const CLI::App& app) {
    // The application's description is "tidemark VERSION: what it does."
    std::string what = app.get_description();
    if (const size_t colon = what.find(": "); colon != std::string::npos)
        what = what.substr(colon + 2);
    std::string out;
    out +=
        ".\\\" Generated by 'tidemark _generate man' from the options tidemark defines; do not "
        "edit.\n";
    out += ".TH TIDEMARK 1 \"\" \"tidemark " TIDEMARK_VERSION "\" \"User Commands\"\n";
    out += ".nh\n.ad l\n";
    out += ".SH NAME\ntidemark \\- " + roff(what) + "\n";
    out += ".SH SYNOPSIS\n";
    for (const CLI::App* s : visible_subcommands(app)) {
        out += synopsis_of(*s) + "\n.br\n";
        for (const CLI::App* n : visible_subcommands(*s)) out += synopsis_of(*n) + "\n.br\n";
    }
    out += "\\fBtidemark\\fR \\fB\\-\\-help\\fR | \\fB\\-\\-version\\fR\n";
    out += ".SH DESCRIPTION\n\\fBtidemark\\fR: " + roff(what) + "\n";
    out +=
        ".PP\nRegion strings (\\fB\\-r\\fR) are 1-based and inclusive (NAME:BEG-END); BED files "
        "and every "
        "output are 0-based and half-open. Messages say which convention a position uses.\n";
    out += ".SH OPTIONS\n";
    for (const CLI::Option* o : visible_options(app)) out += man_option(*o);
    out += ".SH SUBCOMMANDS\n";
    for (const CLI::App* s : visible_subcommands(app)) out += man_section(*s);
    out += ".SH BUILT-IN PROFILES\n";
    for (const auto& b : builtin_profiles()) {
        const Profile p = parse_profile(b.json, std::string(b.name));
        out += ".TP\n\\fB" + roff(std::string(b.name)) + "\\fR\n" + roff(p.description) + "\n";
    }
    out +=
        ".PP\nTheir JSON is installed in \\fIshare/tidemark/profiles\\fR beside the man pages' "
        "\\fIshare\\fR "
        "folder, as a starting point for profiles of your own (\\fB\\-p\\fR \\fIFILE\\fR).\n";
    out += ".SH EXIT STATUS\n";
    const std::pair<int, const char*> codes[] = {
        {0, "success"},
        {1, "bad input: sequence, BED or profile file, region string, missing file"},
        {2, "bad command line: unknown option, value out of range, conflicting options"},
        {3, "an output could not be written (disk full, closed pipe, permissions)"},
        {4, "internal error (a bug: please report it with the command line)"},
    };
    for (const auto& [code, meaning] : codes)
        out += fmt::format(".TP\n\\fB{}\\fR\n{}\n", code, roff(meaning));
    out += ".SH OUTPUT COLUMNS\n";
    out += ".PP\nAll coordinates are 0-based and half-open, as in BED; the GFF3 file is 1-based.\n";
    out += ".PP\nCalls (\\fB\\-o\\fR, BED6+4), tab-separated:\n";
    int number = 0;
    for (const BedColumn& c : bed_columns)
        out += fmt::format(".TP\n{} \\fB{}\\fR\n{}\n", ++number, roff(c.name), roff(c.meaning));
    out += roff_paragraphs(
        "With --bed-style browser the file is BED9+4: a track line, columns 1-6, thickStart and "
        "thickEnd (the call's core: its first to last base with P(region) >= --core-posterior), "
        "itemRgb, then columns 7-10 above. GFF3 (--gff3) carries the same values as attributes "
        "(mean_posterior, confident_fraction, gc_fraction, cpg_obs_exp, core_start, core_end).\n\n"
        "Posterior tracks (--posteriors PREFIX): PREFIX.REGION.bedgraph (chrom, start, end, "
        "P(region) rounded to --posterior-digits, equal neighbours merged) or PREFIX.REGION.bw "
        "with --track-format bigwig; runs of at least 100 unknown bases have no data.\n\n"
        "Summary (--summary, JSON tidemark-summary/1): per contig and for the genome the length, "
        "unknown bases, GC fraction, CpG o/e, log-likelihood and per region type expected_bases "
        "(sum of posteriors over known bases), expected_fraction (its share of the known bases), "
        "calls and called_bases (known bases inside calls). The table printed at the end of a run "
        "gives called% and expected% as shares of the known bases.");
    out += ".SH EXAMPLES\n";
    const std::pair<const char*, const char*> examples[] = {
        {"CpG islands of an assembly (default profile cpg-island) as BED:",
         "tidemark scan genome.fa.gz -o islands.bed"},
        {"Posterior tracks, a JSON summary and an HTML report beside the calls:",
         "tidemark scan genome.fa -o calls.bed --posteriors tracks/genome --summary run.json "
         "--html report.html"},
        {"Only some regions of a bgzip or plain FASTA (1-based, inclusive):",
         "tidemark scan genome.fa.gz -r chr7:27,100,000-27,300,000 -r chrX -o calls.bed"},
        {"Calls for a genome browser: bgzip-compressed and tabix-indexed, with a bigWig track:",
         "tidemark scan genome.fa --bed-style browser --bgzip -o calls.bed.gz --posteriors post "
         "--track-format bigwig"},
        {"GC-rich and AT-rich domains (isochore families, decoded in 20-kb windows):",
         "tidemark scan -p isochore genome.fa -o domains.bed"},
        {"Learn a profile from the genome itself, then scan with it:",
         "tidemark fit genome.fa -p gc-shift -o genome.gc-shift.json\n"
         "tidemark scan genome.fa -p genome.gc-shift.json -o islands.bed"},
        {"Score a profile on a synthetic genome with known truth:",
         "tidemark simulate --contigs 3 --length 1000000 --seed 1 -o sim.fa --truth truth.bed\n"
         "tidemark scan sim.fa -o calls.bed\n"
         "tidemark compare calls.bed truth.bed"},
        {"Two machines, then one merge (each shard in its own folder, same output names):",
         "mkdir 1 2\n"
         "(cd 1 && tidemark scan ../genome.fa --shard 1/2 --whole-contigs -o calls.bed "
         "--summary s.json)\n"
         "(cd 2 && tidemark scan ../genome.fa --shard 2/2 --whole-contigs -o calls.bed "
         "--summary s.json)\n"
         "tidemark merge --shard-summaries 1/s.json 2/s.json --shard-beds 1/calls.bed "
         "2/calls.bed -o calls.bed --summary s.json"},
    };
    for (const auto& [task, commands] : examples)
        out += ".PP\n" + roff(task) + "\n.PP\n.RS 4\n.nf\n" + roff(commands) + "\n.fi\n.RE\n";
    out +=
        ".SH FILES\n.TP\n\\fIshare/bash\\-completion/completions/tidemark\\fR\nbash completion.\n"
        ".TP\n\\fIshare/tidemark/profiles/*.json\\fR\nthe built-in profiles, as starting points "
        "for profiles of your own.\n"
        ".TP\n\\fIshare/tidemark/scripts/plot\\-region.py\\fR\none region at base resolution: "
        "GC, CpG o/e, posteriors and calls (python3\\-matplotlib).\n";
    return out;
}

// bash: single-quoted word.
std::string sh(const std::string& w) {
    std::string out = "'";
    for (char c : w) out += c == '\'' ? std::string("'\\''") : std::string(1, c);
    return out + "'";
}

std::string join(const std::vector<std::string>& words) {
    std::string out;
    for (const auto& w : words) out += (out.empty() ? "" : " ") + w;
    return out;
}

std::string bash_completion(const CLI::App& app) {
    std::map<std::string, std::string> subcommands, options, values;
    std::vector<std::string> profiles;
    for (const auto& b : builtin_profiles()) profiles.emplace_back(b.name);
    std::function<void(const CLI::App&, const std::string&)> walk = [&](const CLI::App& a,
                                                                        const std::string& path) {
        std::vector<std::string> subs, opts;
        for (const CLI::App* s : visible_subcommands(a)) {
            subs.push_back(s->get_name());
            walk(*s, path + " " + s->get_name());
        }
        for (const CLI::Option* o : visible_options(a)) {
            if (o->get_positional()) continue;
            for (const auto& s : spellings(*o)) {
                opts.push_back(s);
                if (!takes_value(*o)) continue;
                // A value: its choices, the built-in profiles (and files), or a file.
                const auto choices = choices_of(*o);
                values[path + " " + s] = !choices.empty()            ? join(choices)
                                         : o->check_lname("profile") ? "@files " + join(profiles)
                                                                     : "@files";
            }
        }
        if (!subs.empty()) subcommands[path] = join(subs);
        options[path] = join(opts);
    };
    walk(app, "tidemark");
    std::string out =
        "# bash completion for tidemark. Generated by 'tidemark _generate bash-completion' from "
        "the options\n"
        "# tidemark defines; do not edit.\n";
    const auto table = [&](const char* name, const std::map<std::string, std::string>& m) {
        out += fmt::format("declare -gA {}=(\n", name);
        for (const auto& [k, v] : m) out += fmt::format("  [{}]={}\n", sh(k), sh(v));
        out += ")\n";
    };
    table("_tidemark_subcommands", subcommands);
    table("_tidemark_options", options);
    table("_tidemark_values", values);
    out += R"(
_tidemark() {
    local cur=${COMP_WORDS[COMP_CWORD]} path=tidemark i w candidates=""
    COMPREPLY=()
    # The subcommand path so far; an option's value is skipped.
    for ((i = 1; i < COMP_CWORD; i++)); do
        w=${COMP_WORDS[i]}
        if [[ -n ${_tidemark_values["$path $w"]+set} ]]; then
            ((i++))
        elif [[ " ${_tidemark_subcommands[$path]} " == *" $w "* ]]; then
            path="$path $w"
        fi
    done
    local prev=${COMP_WORDS[COMP_CWORD-1]}
    if ((COMP_CWORD > 1)) && [[ -n ${_tidemark_values["$path $prev"]+set} ]]; then
        candidates=${_tidemark_values["$path $prev"]}
        if [[ $candidates == @files* ]]; then
            COMPREPLY=($(compgen -W "${candidates#@files}" -- "$cur") $(compgen -f -- "$cur"))
            compopt -o filenames 2>/dev/null
        else
            COMPREPLY=($(compgen -W "$candidates" -- "$cur"))
        fi
        return 0
    fi
    if [[ $cur == -* ]]; then
        COMPREPLY=($(compgen -W "${_tidemark_options[$path]}" -- "$cur"))
    elif [[ -n ${_tidemark_subcommands[$path]+set} ]]; then
        COMPREPLY=($(compgen -W "${_tidemark_subcommands[$path]}" -- "$cur"))
    else
        COMPREPLY=($(compgen -f -- "$cur"))
        compopt -o filenames 2>/dev/null
    fi
    return 0
}
complete -F _tidemark tidemark
)";
    return out;
}

}  // namespace

void add_docs(CLI::App& app, Context& ctx) {
    auto kind = std::make_shared<std::string>();
    auto output = std::make_shared<std::string>("-");
    CLI::App* cmd = app.add_subcommand(
        "_generate", "Write the man page or the bash completion script (for the build)");
    cmd->group("");  // hidden: not in --help, the man page or completion
    cmd->add_option("kind", *kind, "man or bash-completion")
        ->check(CLI::IsMember({"man", "bash-completion"}))
        ->required();
    cmd->add_option("-o,--output", *output, "output file (- for stdout)");
    cmd->callback([=, &app, &ctx] {
        ctx.action = [=, &app] {
            OutputFile out(*output);
            out.write(*kind == "man" ? man_page(app) : bash_completion(app));
            out.commit();
            return 0;
        };
    });
}

}  // namespace tidemark::cli
