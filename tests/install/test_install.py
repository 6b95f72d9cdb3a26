"""Install test: `cmake --install BUILD --prefix TMP` puts the binary, the man page, the bash
completion, the built-in profiles' JSON and the plotting scripts in place; the man page renders
with man-db (`man -l`) and groff, and it and the completion name every subcommand and option that
`--help` lists. The library, its headers and its CMake package are installed too: a project
outside the tree (tests/install/consumer) finds them with find_package(tidemark), links
tidemark::tidemark, and decodes a short sequence whose posteriors and log-likelihood are checked
against an exhaustive enumeration of every state path.

Usage: test_install.py CMAKE BUILD_DIR SOURCE_DIR
"""

import glob
import itertools
import json
import math
import os
import re
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "oracle"))
import tmtest  # noqa: E402  (Checks only; the binary comes from the install)
from test_pomegranate import Tables  # noqa: E402  (profile JSON -> numpy tables, context rule)

ENUMERATION = "exhaustive enumeration of all state paths (Python)"


def enumerate_paths(t, seq):
    """Log-likelihood and per-position state posteriors by summing P(path, seq) over every state
    path: independent of any recursion (order <= 1 emissions, the mean row at the start)."""
    codes = ["ACGT".index(c) for c in seq]
    S, n = len(t.states), len(codes)
    total = 0.0
    marginal = [[0.0] * S for _ in range(n)]
    for path in itertools.product(range(S), repeat=n):
        p = t.initial[path[0]] * t.emission(path[0], None, codes[0])
        for i in range(1, n):
            p *= t.trans[path[i - 1], path[i]] * t.emission(path[i], codes[i - 1], codes[i])
        total += p
        for i, s in enumerate(path):
            marginal[i][s] += p
    return math.log(total), [[m / total for m in row] for row in marginal]


def cache_value(build, name):
    """A variable of BUILD/CMakeCache.txt ('' when absent)."""
    with open(os.path.join(build, "CMakeCache.txt"), encoding="utf-8") as f:
        for line in f:
            if line.startswith(name + ":"):
                return line.split("=", 1)[1].strip()
    return ""


def sanitized(build):
    """The sanitizer build (scripts/test.sh, build-asan): what a program that links its library
    needs, and what python3 needs to load its module (the ASan runtime first)."""
    if cache_value(build, "TIDEMARK_SANITIZE").upper() not in ("ON", "TRUE", "1"):
        return [], {}
    flags = "-fsanitize=address,undefined"
    compiler = cache_value(build, "CMAKE_CXX_COMPILER")
    preload = [run([compiler, f"-print-file-name={lib}"]).stdout.strip() for lib in ("libasan.so", "libstdc++.so.6")]
    return ([f"-DCMAKE_CXX_FLAGS={flags}", f"-DCMAKE_EXE_LINKER_FLAGS={flags}"],
            {"LD_PRELOAD": " ".join(preload), "ASAN_OPTIONS": "detect_leaks=0"})


def check_consumer(checks, cmake, prefix, source, binary, workdir, build):
    for path in ("include/tidemark/decode.hpp", "include/tidemark/profile.hpp"):
        checks.check(os.path.isfile(os.path.join(prefix, path)), f"installed {path}", "CMake install")
    libs = [d for d in os.listdir(prefix) if d.startswith("lib")]
    found = [os.path.join(root, f) for d in libs for root, _, files in os.walk(os.path.join(prefix, d))
             for f in files if f in ("libtidemark.a", "tidemarkConfig.cmake", "tidemarkConfigVersion.cmake",
                                     "tidemarkTargets.cmake")]
    checks.equal(sorted(os.path.basename(f) for f in found),
                 ["libtidemark.a", "tidemarkConfig.cmake", "tidemarkConfigVersion.cmake", "tidemarkTargets.cmake"],
                 "installed library and CMake package files", "CMake install(EXPORT), CMakePackageConfigHelpers")
    flags, _ = sanitized(build)
    consumer = os.path.join(workdir, "consumer-build")
    r = run([cmake, "-S", os.path.join(source, "tests", "install", "consumer"), "-B", consumer,
             f"-DCMAKE_PREFIX_PATH={prefix}", "-DCMAKE_BUILD_TYPE=Release", *flags])
    if not checks.check(r.returncode == 0, "a project outside the tree configures with find_package(tidemark)",
                        "CMake find_package", (r.stdout + r.stderr)[-1500:]):
        return
    r = run([cmake, "--build", consumer])
    if not checks.check(r.returncode == 0, "the consumer links tidemark::tidemark", "CMake target_link_libraries",
                        (r.stdout + r.stderr)[-1500:]):
        return
    seq = "ACGCGCGTTAAT"  # 2^12 paths of the two-state profile
    t = Tables(json.loads(run([binary, "profiles", "show", "cpg-island-2state"]).stdout))
    r = run([os.path.join(consumer, "consumer"), "cpg-island-2state", seq])
    if not checks.check(r.returncode == 0, "the consumer decodes", "consumer exit status", r.stderr):
        return
    lines = r.stdout.split("\n")
    loglik = float(lines[0])
    got = [[float(x) for x in line.split("\t")] for line in lines[1:1 + len(seq)]]
    expected_ll, expected = enumerate_paths(t, seq)
    checks.at_most(abs(loglik - expected_ll) / abs(expected_ll), 1e-12,
                   f"consumer log-likelihood {loglik:.15f} vs {expected_ll:.15f}, relative", ENUMERATION)
    diff = max(abs(a - b) for row, erow in zip(got, expected) for a, b in zip(row, erow))
    checks.at_most(diff, 1e-12, f"consumer posteriors of {len(seq)} bases, max abs difference", ENUMERATION)
    r = run([os.path.join(consumer, "consumer"), "cpg-island-2state", "ACGU"])
    checks.check(r.returncode == 1 and "illegal character 'U'" in r.stderr,
                 "the consumer gets the library's InputError for a bad base", "tidemark error.hpp", r.stderr)


def run(args, **kw):
    return subprocess.run(args, capture_output=True, text=True, **kw)


def help_items(binary, path):
    """The subcommands, options and positionals that `tidemark PATH --help` lists (CLI11's layout:
    sections 'Options:', 'Positionals:', 'Subcommands:' and indented rows)."""
    text = run([binary, *path, "--help"]).stdout
    options, positionals, subcommands = [], [], []
    section = None
    for line in text.splitlines():
        if line and not line.startswith(" "):
            section = line.rstrip(":").strip()
            continue
        m = re.match(r"^  (\S+)", line)
        if not m:
            continue
        word = m.group(1)
        if section == "Subcommands":
            subcommands.append(word)
        elif section == "Positionals":
            positionals.append(word)
        elif word.startswith("-"):
            options += [w for w in word.split(",") if w.startswith("-")]
    return options, positionals, subcommands


def plain(text):
    """Rendered man text without overstriking and with typographic hyphens as '-'."""
    text = re.sub(".\b", "", text)
    return text.replace("\u2212", "-").replace("\u2010", "-")


def complete(completion, words, cursor_word):
    """Runs the completion function the way bash does: COMP_WORDS and COMP_CWORD set, _tidemark called."""
    script = (f"source {completion!r}; COMP_WORDS=({' '.join(repr(w) for w in words)} {cursor_word!r}); "
              f"COMP_CWORD={len(words)}; _tidemark; printf '%s\\n' \"${{COMPREPLY[@]}}\"")
    return run(["bash", "--norc", "--noprofile", "-c", script]).stdout.split()


def body(checks, cmake, build, source):
    with tempfile.TemporaryDirectory(prefix="tidemark-install-") as prefix:
        r = run([cmake, "--install", build, "--prefix", prefix])
        checks.check(r.returncode == 0, "cmake --install into a temporary prefix", "CMake install", r.stderr[-500:])
        binary = os.path.join(prefix, "bin", "tidemark")
        man_page = os.path.join(prefix, "share", "man", "man1", "tidemark.1")
        completion = os.path.join(prefix, "share", "bash-completion", "completions", "tidemark")
        for path in (binary, man_page, completion):
            checks.check(os.path.isfile(path), f"installed {os.path.relpath(path, prefix)}", "CMake install")
        checks.check(os.access(binary, os.X_OK), "the binary is executable", "CMake install")
        profiles = sorted(f for f in os.listdir(os.path.join(source, "data", "profiles")) if f.endswith(".json"))
        for p in profiles:
            checks.check(os.path.isfile(os.path.join(prefix, "share", "tidemark", "profiles", p)),
                         f"installed profile {p}", "CMake install")
        listed = run([binary, "profiles"]).stdout.split("\n")
        for p in profiles:
            name = p[:-5]
            checks.check(any(line.split()[:1] == [name] for line in listed),
                         f"installed profile {name} is a built-in of the installed binary", "tidemark profiles")
            r = run([binary, "profiles", "check", os.path.join(prefix, "share", "tidemark", "profiles", p)])
            checks.check(r.returncode == 0, f"installed {p} validates", "tidemark profiles check", r.stderr)
        scripts = sorted(f for f in os.listdir(os.path.join(source, "scripts")) if re.match(r"plot-.*\.py$", f))
        for s in scripts:
            path = os.path.join(prefix, "share", "tidemark", "scripts", s)
            checks.check(os.path.isfile(path) and os.access(path, os.X_OK), f"installed script {s}", "CMake install")
        r = run([binary, "--version"])
        checks.check(r.returncode == 0 and r.stdout.startswith("tidemark "), "installed binary runs", "--version")

        # Rendered by two independent formatters: man-db's man -l and groff's man macros.
        env = dict(os.environ, MANWIDTH="100", MAN_KEEP_FORMATTING="0", LC_ALL="C.UTF-8")
        rendered = run(["man", "-l", man_page], env=env)
        man_text = plain(rendered.stdout)
        checks.check(rendered.returncode == 0 and "TIDEMARK(1)" in man_text, "man -l renders the page",
                     "man-db", rendered.stderr[-300:])
        lint = run(["groff", "-man", "-Tutf8", "-ww", "-z", man_page])
        checks.check(lint.returncode == 0 and not lint.stderr.strip(), "groff formats the page without warnings",
                     "groff -man -ww", lint.stderr[-500:])
        for section in ("NAME", "SYNOPSIS", "DESCRIPTION", "OPTIONS", "SUBCOMMANDS", "EXIT STATUS", "OUTPUT COLUMNS",
                        "EXAMPLES", "FILES"):
            checks.check(re.search(rf"^{section}$", man_text, re.M), f"man page has section {section}", "man-pages(7)")

        def section_text(name):
            return re.split(r"^\S", man_text.split(f"\n{name}\n", 1)[-1], maxsplit=1, flags=re.M)[0]

        # OUTPUT COLUMNS: every column of the BED header the installed binary writes, numbered in order.
        with tempfile.TemporaryDirectory(prefix="tidemark-install-run-") as run_dir:
            fa = os.path.join(run_dir, "x.fa")
            with open(fa, "w") as f:
                f.write(">x\n" + "ACGT" * 100 + "\n")
            header = [l for l in run([binary, "scan", "-q", fa]).stdout.splitlines() if l.startswith("#chrom")]
        columns = header[0][1:].split("\t") if header else []
        outputs = section_text("OUTPUT COLUMNS")
        checks.check(len(columns) == 10 and all(re.search(rf"^\s*{i} {re.escape(c)}\b", outputs, re.M)
                                                for i, c in enumerate(columns, 1)),
                     "OUTPUT COLUMNS lists every BED column, numbered as the file's header orders them",
                     "the #chrom header line of the installed binary's BED", ", ".join(columns))
        # EXAMPLES: every example command line names a subcommand the binary has.
        examples = [l.strip() for l in section_text("EXAMPLES").splitlines() if "tidemark " in l]
        commands = [re.search(r"tidemark (\w+)", l).group(1) for l in examples]
        checks.check(len(examples) >= 5 and set(commands) <= {"scan", "fit", "simulate", "compare", "merge", "profiles"}
                     and {"scan", "fit", "merge"} <= set(commands),
                     "EXAMPLES shows the main jobs (scan, fit, merge) with real subcommands",
                     "README, Usage", ", ".join(commands))
        # FILES: every path listed is installed (the retired plotting script is not listed).
        listed_files = re.findall(r"^\s{7}(share/\S+)$", section_text("FILES"), re.M)
        missing = [f for f in listed_files if not glob.glob(os.path.join(prefix, f))]
        checks.check(listed_files and not missing, "every path in FILES is installed", "CMake install",
                     f"listed {listed_files}, missing {missing}")
        checks.check("plot-overview" not in man_text, "the retired plot-overview.py is not in the man page",
                     "README: the script is gone")

        # Every subcommand, positional and option of --help, at every level, in the page and the completion.
        pending, seen = [[]], 0
        while pending:
            path = pending.pop(0)
            options, positionals, subcommands = help_items(binary, path)
            seen += len(options) + len(subcommands)
            heading = "tidemark " + " ".join(path) if path else "tidemark"
            for s in subcommands:
                pending.append(path + [s])
                checks.check(re.search(rf"^\s*{re.escape(heading + ' ' + s)}$", man_text, re.M),
                             f"man page has a section for '{heading} {s}'", "tidemark --help")
                checks.check(s in complete(completion, ["tidemark", *path], s[:2]),
                             f"completion offers '{s}' after '{heading}'", "bash complete -F")
            if path:
                section = man_text.split(f"\n   {heading}\n", 1)[-1]
                section = re.split(r"^ {0,3}\S", section, maxsplit=1, flags=re.M)[0]  # up to the next heading
                for o in options:
                    checks.check(re.search(rf"(^|[\s,]){re.escape(o)}([\s,]|$)", section, re.M),
                                 f"man page lists {o} of '{heading}'", "tidemark --help")
                for p in positionals:
                    checks.check(p in section, f"man page lists argument {p} of '{heading}'", "tidemark --help")
            offered = complete(completion, ["tidemark", *path], "-")
            for o in options:
                checks.check(o in offered, f"completion offers {o} for '{heading}'", "bash complete -F")
        checks.check(seen > 40, f"--help listed {seen} options and subcommands", "tidemark --help")

        # Option values: choices, profiles, files.
        checks.equal(complete(completion, ["tidemark", "scan", "--decode"], ""), ["posterior", "viterbi"],
                     "completion of --decode values", "scan --help: {posterior,viterbi}")
        checks.check("cpg-island" in complete(completion, ["tidemark", "scan", "-p"], "cpg"),
                     "completion of -p offers built-in profiles", "tidemark profiles")
        checks.check(complete(completion, ["tidemark", "scan", "-p", "x.json"], "--bgz") == ["--bgzip"],
                     "completion skips an option's value", "bash complete -F")

        with tempfile.TemporaryDirectory(prefix="tidemark-consumer-") as workdir:
            check_consumer(checks, cmake, prefix, source, binary, workdir, build)

        # A build with the Python module (-DTIDEMARK_BUILD_PYTHON=ON) installs the package where
        # Debian's python3 looks under the prefix; it imports from there, away from the build tree.
        site = os.path.join(prefix, "lib", f"python{sys.version_info.major}.{sys.version_info.minor}",
                            "dist-packages")
        if os.path.isdir(os.path.join(site, "tidemark")):
            code = ("import tidemark; d = tidemark.decode('ACGCGCGTTAAT', 'cpg-island-2state', threads=1); "
                    "print(tidemark.__file__); print(repr(d.log_likelihood))")
            r = run([sys.executable, "-c", code], cwd="/", env=dict(os.environ, PYTHONPATH=site, **sanitized(build)[1]))
            lines = r.stdout.split()
            checks.check(r.returncode == 0 and lines[0].startswith(site), "the installed Python package imports",
                         "python3 -c 'import tidemark'", r.stderr[-800:])
            if r.returncode == 0:
                t = Tables(json.loads(run([binary, "profiles", "show", "cpg-island-2state"]).stdout))
                expected_ll, _ = enumerate_paths(t, "ACGCGCGTTAAT")
                checks.at_most(abs(float(lines[1]) - expected_ll) / abs(expected_ll), 1e-12,
                               "installed Python package: log-likelihood, relative", ENUMERATION)


if __name__ == "__main__":
    if len(sys.argv) != 4:
        print(__doc__, file=sys.stderr)
        sys.exit(2)
    checks = tmtest.Checks("install")
    try:
        body(checks, sys.argv[1], os.path.abspath(sys.argv[2]), os.path.abspath(sys.argv[3]))
    except Exception:
        import traceback
        traceback.print_exc()
        checks.failed += 1
    checks.finish()
