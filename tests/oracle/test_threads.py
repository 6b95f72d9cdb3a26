"""scan and fit with --threads 1, 2 and 3 against each other (every output byte for byte, the
report apart from its "resources"), on many contigs and on one contig long enough to be decoded
in segments; the same with the portable decoder kernels (TIDEMARK_KERNELS=portable) against the
ones chosen for this processor (AVX2 where it has it); and the segmented posteriors of both
against numpy's own scaled forward-backward."""

import contextlib
import json
import os

import numpy as np

import tmtest

ONE = "the same command with --threads 1 (outputs must not depend on the thread count)"
NUMPY = "scaled forward-backward written here in numpy (independent of tidemark)"
KERNELS = ("the same command with the kernels chosen for this processor (both kernels do the same IEEE "
           "multiplications and additions in the same order, so their bits must agree)")


@contextlib.contextmanager
def portable_kernels():
    os.environ["TIDEMARK_KERNELS"] = "portable"
    try:
        yield
    finally:
        del os.environ["TIDEMARK_KERNELS"]


def records(rng, lengths, prefix):
    out = []
    for i, n in enumerate(lengths):
        seq = rng.choice(list("ACGT"), size=n, p=[0.3, 0.2, 0.2, 0.3])
        for start in rng.integers(0, max(1, n - 3000), size=max(1, n // 40000)):
            seq[start:start + 1500] = rng.choice(list("CG"), size=min(1500, n - start))
        if n > 20000:
            seq[n // 3:n // 3 + 700] = "N"
        text = "".join(seq)
        if i % 2:
            text = text[:1000] + text[1000:4000].lower() + text[4000:]
        out.append((f"{prefix}{i + 1}", text))
    return out


def outputs(binary, workdir, tag, fasta, threads, extra):
    d = os.path.join(workdir, f"{tag}-t{threads}")
    os.makedirs(d, exist_ok=True)
    # Relative output names: the recorded command line is then the same in every folder.
    args = ["scan", "-q", "-t", str(threads), fasta, "-o", "calls.bed", "--bed-style", "browser",
            "--gff3", "calls.gff3", "--summary", "summary.json", "--report", "report.json",
            "--chrom-sizes", "sizes.txt", "--posteriors", "p", "--posterior-digits", "6"] + extra
    tmtest.run(binary, args, cwd=d)
    tmtest.run(binary, ["scan", "-q", f"--threads={threads}", fasta, "-o", "bw.bed", "--posteriors", "bw",
                        "--track-format", "bigwig", "--bin", "5"] + extra, cwd=d)
    tmtest.run(binary, ["scan", "-q", f"-t{threads}", fasta, "-o", "viterbi.bed", "--decode", "viterbi"] + extra,
               cwd=d)
    files = {}
    for name in sorted(os.listdir(d)):
        with open(os.path.join(d, name), "rb") as f:
            data = f.read()
        if name == "report.json":
            doc = json.loads(data)
            doc.pop("resources")
            data = json.dumps(doc, sort_keys=True).encode()
        files[name] = data
    return files


def numpy_posteriors(profile, seq):
    """Posterior of each state by scaled forward-backward from the profile JSON alone
    (order-1 emissions; unknown bases emit 1; the first base uses the mean row)."""
    states = profile["states"]
    S = len(states)
    names = [s["name"] for s in states]
    code = {c: i for i, c in enumerate("ACGT")}
    x = [code.get(c.upper(), -1) for c in seq]
    log_a = np.log(np.array([[profile["transitions"][a].get(b, 0.0) for b in names] for a in names]))
    log_pi = np.log(np.array([profile["initial"][a] for a in names]))
    em = [np.array(s["emissions"], dtype=float) for s in states]
    n = len(x)
    log_e = np.zeros((n, S))
    for t in range(n):
        for s in range(S):
            if x[t] < 0:
                continue
            if t == 0 or x[t - 1] < 0:
                log_e[t, s] = np.log(em[s][:, x[t]].mean())
            else:
                log_e[t, s] = np.log(em[s][x[t - 1], x[t]])
    # Scaled (per-position normalised) recursions in probability space: log space would add a
    # rounding error of about 1e-16 times |log f| per step, too much for a 1e-9 comparison.
    a = np.exp(log_a)
    e = np.exp(log_e)
    f = np.zeros((n, S))
    b = np.ones((n, S))
    c = np.zeros(n)
    f[0] = np.exp(log_pi) * e[0]
    c[0] = f[0].sum()
    f[0] /= c[0]
    for t in range(1, n):
        f[t] = (f[t - 1] @ a) * e[t]
        c[t] = f[t].sum()
        f[t] /= c[t]
    for t in range(n - 2, -1, -1):
        b[t] = a @ (e[t + 1] * b[t + 1]) / c[t + 1]
    post = f * b
    return post / post.sum(axis=1, keepdims=True), float(np.log(c).sum())


def body(checks, binary, workdir):
    rng = np.random.default_rng(20261201)
    many = os.path.join(workdir, "many.fa")
    tmtest.write_fasta(many, records(rng, [61000, 150000, 4000, 230000, 90000, 12000, 47000, 1], "ctg"))
    long_fa = os.path.join(workdir, "long.fa")
    tmtest.write_fasta(long_fa, records(rng, [2_300_000], "chrL"))
    # --block 2000: 64 Ki segments (the floor), so the many-contig input is also split inside contigs,
    # and the long contig has 36 segments: with 2 and 3 threads it is decoded alone, its first
    # segments swept while the rest is still read.
    # Profiles of 3 and 5 states as well: their decoder kernels differ from the 4-state ones (plain
    # loops where the vectors of the AVX2 build do not fit registers).
    profiles = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "data", "profiles")
    for tag, fasta, extra in [("many", many, []), ("many-small-blocks", many, ["--block", "2000"]),
                              ("long", long_fa, []), ("long-small-blocks", long_fa, ["--block", "2000"]),
                              ("long-3-states", long_fa, ["-p", os.path.join(profiles, "gc-shift-per-base.json")]),
                              ("long-5-states", long_fa, ["-p", os.path.join(profiles, "isochore-per-base.json")])]:
        base = outputs(binary, workdir, tag, fasta, 1, extra)
        for threads in (2, 3):
            other = outputs(binary, workdir, tag, fasta, threads, extra)
            checks.equal(sorted(other), sorted(base), f"{tag}: same output files with --threads {threads}", ONE)
            for name in sorted(base):
                checks.check(other.get(name) == base[name], f"{tag}: {name} identical with --threads {threads}", ONE)
        with portable_kernels():
            other = outputs(binary, workdir, tag + "-portable", fasta, 2, extra)
        checks.equal(sorted(other), sorted(base), f"{tag}: same output files with portable kernels", KERNELS)
        for name in sorted(base):
            checks.check(other.get(name) == base[name], f"{tag}: {name} identical with portable kernels", KERNELS)

    # fit: the E-step in a pool; the fitted profile (with provenance) must not change but for the
    # times, which provenance keeps apart under "resources" (README, fit).
    def fit(threads, fasta, iterations):
        tmtest.run(binary, ["fit", "-q", "-t", str(threads), "-p", "cpg-island", "--max-iter", str(iterations),
                            fasta, "-o", "fit.json"], cwd=workdir)
        doc = tmtest.read_json(os.path.join(workdir, "fit.json"))
        times = doc["provenance"].pop("resources")
        evaluations = len(doc["provenance"]["history"])
        checks.check(len(times["iteration_cpu_seconds"]) == evaluations == len(times["iteration_wall_seconds"]) and
                     1 <= evaluations <= iterations + 1 and
                     min(times["iteration_cpu_seconds"]) >= 0 and
                     sum(times["iteration_wall_seconds"]) <= times["wall_seconds"] + 1e-3,
                     f"--threads {threads}: provenance.resources holds one wall and CPU time per evaluation, "
                     "within the fit's total", "README, fit: provenance")
        return json.dumps(doc, sort_keys=True)

    base = fit(1, many, 2)
    for threads in (2, 3):
        checks.check(fit(threads, many, 2) == base, f"fitted profile identical with --threads {threads}", ONE)
    with portable_kernels():
        checks.check(fit(2, many, 2) == base, "fitted profile identical with portable kernels", KERNELS)
    base = fit(1, long_fa, 1)
    checks.check(fit(2, long_fa, 1) == base, "fit on one long (segmented) contig identical with --threads 2", ONE)

    # Segmented posteriors against numpy on a 300-kbp contig in 5 segments of 64 Ki bases (--block
    # 2000: segments are 16 blocks but at least 64 Ki, README), with 2 threads: decoded alone, its
    # first segments swept while the rest is read.
    name, seq = records(rng, [300000], "chrP")[0]
    small = os.path.join(workdir, "small.fa")
    tmtest.write_fasta(small, [(name, seq)])
    profile = json.loads(tmtest.run(binary, ["profiles", "show", "cpg-island"]))
    want, ll = numpy_posteriors(profile, seq)
    region_of = [s["region"] for s in profile["states"]]
    expect = sum(want[:, i] for i, r in enumerate(region_of) if r == "cpg_island")
    gap = tmtest.long_unknown_runs(seq)  # left out of tracks (README)
    for kernels in ("chosen", "portable"):
        prefix = os.path.join(workdir, "seg-" + kernels)
        with portable_kernels() if kernels == "portable" else contextlib.nullcontext():
            tmtest.run(binary, ["scan", "-q", "-t", "2", small, "-o", prefix + ".bed", "--block", "2000",
                                "--posteriors", prefix, "--posterior-digits", "12", "--summary", prefix + ".json"])
        got = tmtest.read_bedgraph(prefix + ".cpg_island.bedgraph", {name: len(seq)})[name]
        checks.check(np.array_equal(np.isnan(got), gap),
                     f"segmented track covers all but the long unknown runs ({kernels} kernels)",
                     "unknown runs counted in Python")
        checks.at_most(float(np.max(np.abs(got[~gap] - expect[~gap]))), 1e-9 + 0.5e-12,
                       f"segmented P(cpg_island) per base (12 digits) vs numpy ({kernels} kernels)", NUMPY)
        summary = tmtest.read_json(prefix + ".json")
        got_ll = summary["contigs"][0]["log_likelihood"]
        checks.at_most(abs(got_ll - ll) / abs(ll), 1e-9,
                       f"segmented log-likelihood vs numpy, relative ({kernels} kernels)", NUMPY)


if __name__ == "__main__":
    tmtest.main("--threads: outputs independent of the thread count", body)
