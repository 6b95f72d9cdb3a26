"""Window profiles (beta-binomial G+C counts of fixed windows): `tidemark scan`'s log-likelihood,
per-base posteriors and Viterbi path against exhaustive enumeration of every state path on tiny
contigs and against an independent numpy/scipy forward-backward in log space on windows whose
states differ by thousands of nats and on human chrX; the acceptance
figures of issue 11 for the built-in isochore profile on chrX 1-70 Mb; and outputs that are byte
for byte the same for any thread count and for --shard I/N + merge."""

import gzip
import itertools
import json
import math
import os
import shutil
import sys

import numpy as np
from scipy.special import logsumexp
from scipy.stats import betabinom

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402
from test_shard_merge import scenario  # noqa: E402

# Open dataset shipped by Debian's smalt-examples: human GRCh37 chrX, bases 1-70,000,000 (the
# record is named X; its first 60,000 bases are N).
CHRX = "/usr/share/doc/smalt/test/data/hs37chrXtrunc.fa.gz"

ENUM = "exhaustive enumeration of every state path in Python, beta-binomial as rising factorials summed in numpy"
NUMPY = "forward-backward over windows in log space written here in numpy/scipy, beta-binomial as rising factorials"
SCIPY = "forward-backward over windows in log space written here in numpy/scipy, emissions from scipy.stats.betabinom"
PYTHON = "Python count over the same FASTA"
ONE = "the same command with --threads 1 (outputs must not depend on the thread count)"
ISSUE = "acceptance figure of issue 11"
COSTANTINI = ("Costantini, Clay, Auletta & Bernardi (2006) An isochore map of human chromosomes, "
              "Genome Res. 16:536-541")
# GC ranges of the isochore families, in percent: from memory, attributed to Costantini et al. 2006.
FAMILY_RANGE = {"L1": (0.0, 37.0), "L2": (37.0, 41.0), "H1": (41.0, 46.0), "H2": (46.0, 53.0), "H3": (53.0, 100.0)}
FAMILY_SOURCE = COSTANTINI + ": family GC ranges L1 <37, L2 37-41, H1 41-46, H2 46-53, H3 >53 % (from memory)"
# PAR1 of GRCh37 chrX, 1-based inclusive: from memory (GRCh37 assembly's pseudoautosomal region 1).
PAR1 = (60_001, 2_699_520)
PAR1_SOURCE = "GRCh37 PAR1 chrX:60,001-2,699,520 (from memory); GC-rich, H families, " + COSTANTINI

LIKELIHOOD_TOL = 1e-12  # relative, enumeration
POSTERIOR_TOL = 1e-9    # absolute, per base
REAL_TOL = 1e-9         # relative log-likelihood and absolute posteriors, numpy on chrX


# ------------------------------------------------------------------------------------------------
# The model, read from the profile JSON alone (tidemark-profile/1 as documented in profile.hpp).

class WindowHMM:
    """A window profile: states with their regions, beta-binomial parameters and duration chains."""

    def __init__(self, profile):
        self.window = profile["window"]["size"]
        self.regions = [r["name"] for r in profile["regions"]]
        self.reported = [r["report"] for r in profile["regions"]]
        self.names = [s["name"] for s in profile["states"]]
        self.S = len(self.names)
        self.region = np.array([self.regions.index(s["region"]) for s in profile["states"]])
        # Documented rule: min_length in bases, rounded up to whole windows.
        self.chain = [math.ceil(r.get("min_length", 1) / self.window) for r in profile["regions"]]
        self.a = np.array([[profile["transitions"].get(i, {}).get(j, 0.0) for j in self.names] for i in self.names])
        self.pi = np.array([profile["initial"].get(i, 0.0) for i in self.names])
        # alpha = m (1/rho - 1), beta = (1 - m)(1/rho - 1) (the parametrisation profile.hpp documents).
        mean = np.array([s["gc"]["mean"] for s in profile["states"]])
        rho = np.array([s["gc"]["dispersion"] for s in profile["states"]])
        self.alpha = mean * (1 / rho - 1)
        self.beta = (1 - mean) * (1 / rho - 1)

    def log_emissions(self, gc, known, exact=True):
        """log P(k G+C | n known) per window and state; all-unknown windows emit 1. exact: the
        beta-binomial's rising-factorial form C(n,k) a^(k) b^(n-k) / (a+b)^(n), x^(j) = x (x+1)
        ... (x+j-1), summed log by log (no lgamma, whose differences lose digits for narrow
        distributions); otherwise scipy.stats.betabinom."""
        out = np.zeros((len(gc), self.S))
        for s in range(self.S):
            if not exact:
                out[:, s] = betabinom.logpmf(gc, known, self.alpha[s], self.beta[s])
                continue
            a, b = self.alpha[s], self.beta[s]
            for t, (k, n) in enumerate(zip(gc.tolist(), known.tolist())):
                out[t, s] = math.fsum(np.concatenate([
                    np.log(np.arange(n - k + 1, n + 1)), -np.log(np.arange(1, k + 1)),
                    np.log(a + np.arange(k)), np.log(b + np.arange(n - k)), -np.log(a + b + np.arange(n))]))
        out[known == 0, :] = 0.0
        return out

    def path_log_prob(self, path, log_em):
        """log P(path, windows) by the documented chain rule: a segment (a maximal run of one
        region's states) is at least L windows long unless the contig ends it; while it is
        shorter than L the in-region transitions are renormalised to sum to 1."""
        if self.pi[path[0]] == 0:
            return -math.inf
        lp = math.log(self.pi[path[0]]) + log_em[0, path[0]]
        run = 1
        for t in range(1, len(path)):
            s, u = path[t - 1], path[t]
            r = self.region[s]
            a = self.a[s, u]
            if self.region[u] == r:
                if run < self.chain[r]:
                    a /= self.a[s, self.region == r].sum()
                run += 1
            else:
                if run < self.chain[r]:
                    return -math.inf
                run = 1
            if a == 0:
                return -math.inf
            lp += math.log(a) + log_em[t, u]
        return lp

    def expanded(self):
        """The same model as a plain HMM over (state, place in chain) pairs, for forward-backward."""
        index = {}
        for s in range(self.S):
            for c in range(1, self.chain[self.region[s]] + 1):
                index[(s, c)] = len(index)
        C = len(index)
        T = np.zeros((C, C))
        pi = np.zeros(C)
        of_state = np.zeros(C, dtype=int)
        for (s, c), i in index.items():
            of_state[i] = s
            if c == 1:
                pi[i] = self.pi[s]
            r = self.region[s]
            L = self.chain[r]
            same = self.region == r
            for u in range(self.S):
                if self.a[s, u] == 0:
                    continue
                if c < L:
                    if same[u]:
                        T[i, index[(u, c + 1)]] += self.a[s, u] / self.a[s, same].sum()
                elif same[u]:
                    T[i, index[(u, L)]] += self.a[s, u]
                else:
                    T[i, index[(u, 1)]] += self.a[s, u]
        return T, pi, of_state


def window_counts(seq, w):
    """G+C and known (A, C, G, T) bases of each window [t w, min((t+1) w, len))."""
    a = np.frombuffer(seq.upper().encode("ascii"), dtype=np.uint8)
    known = np.isin(a, np.frombuffer(b"ACGT", dtype=np.uint8))
    gc = np.isin(a, np.frombuffer(b"CG", dtype=np.uint8))
    starts = np.arange(0, len(a), w)
    return np.add.reduceat(gc.astype(np.int64), starts), np.add.reduceat(known.astype(np.int64), starts)


def enumerate_paths(hmm, log_em):
    """log P(windows), region posteriors per window and the best path's log-probability, over
    all S^N state paths; also the best log-probability of every region path (for Viterbi ties)."""
    N = log_em.shape[0]
    paths = np.array(list(itertools.product(range(hmm.S), repeat=N)))
    lps = np.array([hmm.path_log_prob(p, log_em) for p in paths])
    log_total = logsumexp(lps)
    weight = np.exp(lps - log_total)
    regions = hmm.region[paths]  # P x N
    post = np.zeros((N, len(hmm.regions)))
    for r in range(len(hmm.regions)):
        post[:, r] = weight @ (regions == r)
    best_of_region_path = {}
    for rp, lp in zip(map(tuple, regions), lps):
        if lp > best_of_region_path.get(rp, -math.inf):
            best_of_region_path[rp] = lp
    return log_total, post, float(lps.max()), best_of_region_path


def forward_backward(hmm, log_em):
    """log P(windows) and region posteriors per window by forward-backward on the expanded chain
    model, in log space with each vector shifted to log-sum 0 after every step (so that neither
    a vector's range nor the total's size costs digits)."""
    T, pi, of_state = hmm.expanded()
    with np.errstate(divide="ignore"):
        log_t, log_pi = np.log(T), np.log(pi)
    le = log_em[:, of_state]
    N, C = le.shape
    region = hmm.region[of_state]
    lf = np.zeros((N, C))
    shifts = []
    x = log_pi + le[0]
    for t in range(N):
        if t > 0:
            x = logsumexp(lf[t - 1][:, None] + log_t, axis=0) + le[t]
        shifts.append(logsumexp(x))
        lf[t] = x - shifts[-1]
    lb = np.zeros(C)
    post = np.zeros((N, len(hmm.regions)))
    for t in range(N - 1, -1, -1):
        if t < N - 1:
            lb = logsumexp(log_t + (le[t + 1] + lb)[None, :], axis=1)
            lb -= logsumexp(lb)
        g = lf[t] + lb
        p = np.exp(g - logsumexp(g))
        post[t] = np.bincount(region, weights=p, minlength=len(hmm.regions))
    return math.fsum(shifts), post


def viterbi(hmm, log_em):
    """Best path's log-probability and its regions per window, by max-plus recursions in log space
    on the expanded chain model."""
    T, pi, of_state = hmm.expanded()
    with np.errstate(divide="ignore"):
        log_t, log_pi = np.log(T), np.log(pi)
    le = log_em[:, of_state]
    v = log_pi + le[0]
    back = []
    for t in range(1, len(le)):
        cand = v[:, None] + log_t
        back.append(cand.argmax(axis=0))
        v = cand.max(axis=0) + le[t]
    state = int(v.argmax())
    path = [state]
    for arg in reversed(back):
        state = int(arg[state])
        path.append(state)
    return float(v.max()), [int(hmm.region[of_state[s]]) for s in reversed(path)]


def expand_to_bases(window_values, w, length):
    return np.repeat(window_values, w, axis=0)[:length]


def relative(a, b):
    return abs(a - b) / max(1.0, abs(b))


# ------------------------------------------------------------------------------------------------
# (a) tiny contigs against exhaustive enumeration

def tiny_profiles():
    def state(name, region, mean, rho):
        return {"name": name, "region": region, "gc": {"mean": mean, "dispersion": rho}}

    three = {
        "format": "tidemark-profile/1", "name": "three", "window": {"size": 7},
        "regions": [{"name": "at", "report": True}, {"name": "gc", "report": True}],
        "states": [state("at1", "at", 0.3, 0.05), state("at2", "at", 0.5, 0.3), state("gc", "gc", 0.72, 0.1)],
        "initial": {"at1": 0.5, "at2": 0.2, "gc": 0.3},
        "transitions": {"at1": {"at1": 0.6, "at2": 0.25, "gc": 0.15},
                        "at2": {"at1": 0.3, "at2": 0.4, "gc": 0.3},
                        "gc": {"at1": 0.2, "gc": 0.8}},  # gc -> at2 impossible
    }
    # The same states with duration chains: at >= 25 bases (rounded up to 3 windows of 10), gc
    # >= 11 bases (2 windows); a chain region with two states renormalises its in-region moves.
    chained = json.loads(json.dumps(three))
    chained["name"] = "chained"
    chained["window"]["size"] = 10
    chained["regions"][0]["min_length"] = 25
    chained["regions"][1]["min_length"] = 11
    # Two states, 50-base windows, an unreported background region, a 2-window chain.
    two = {
        "format": "tidemark-profile/1", "name": "two", "window": {"size": 50},
        "regions": [{"name": "bg", "report": False}, {"name": "island", "report": True, "min_length": 100}],
        "states": [state("bg", "bg", 0.42, 0.02), state("island", "island", 0.6, 0.01)],
        "initial": {"bg": 0.9, "island": 0.1},
        "transitions": {"bg": {"bg": 0.7, "island": 0.3}, "island": {"bg": 0.4, "island": 0.6}},
    }
    # Narrow beta-binomials on 1-kb windows with 3-window chains: one window's states differ by
    # hundreds of nats, so paths the chains hold on to fall far behind others and come back.
    narrow = {
        "format": "tidemark-profile/1", "name": "narrow", "window": {"size": 1000},
        "regions": [{"name": "lo", "report": True, "min_length": 3000},
                    {"name": "hi", "report": True, "min_length": 2001}],
        "states": [state("lo", "lo", 0.35, 2e-4), state("hi", "hi", 0.6, 1e-4)],
        "initial": {"lo": 0.5, "hi": 0.5},
        "transitions": {"lo": {"lo": 0.9, "hi": 0.1}, "hi": {"lo": 0.1, "hi": 0.9}},
    }
    return [three, chained, two, narrow]


def tiny_contigs(rng, w, S):
    """Contigs of 1 to 8 windows (fewer for larger S) with varied GC per window, an all-N window,
    partly unknown and soft-masked windows, IUPAC codes, and a last window shorter than w."""
    most = 8 if S <= 3 else 6
    records = []

    def window_text(p_gc, n):
        return "".join(rng.choice(list("ACGT"), size=n, p=[(1 - p_gc) / 2, p_gc / 2, p_gc / 2, (1 - p_gc) / 2]))

    for i, N in enumerate([3, 5, most, most - 1, 4, 1]):
        parts = []
        for t in range(N):
            n = w if t < N - 1 else (w if i == 4 else int(rng.integers(1, w)))
            parts.append(window_text(float(rng.choice([0.15, 0.35, 0.5, 0.65, 0.85])), n))
        if N >= 3:
            parts[1] = "N" * len(parts[1])  # an all-unknown window
        if N >= 4:
            p = list(parts[2])
            for j in range(0, len(p), 3):
                p[j] = "N" if j % 2 else "r"  # partly unknown (N and an IUPAC code)
            parts[2] = "".join(p)
            parts[3] = parts[3].lower()  # soft-masked bases count as known
        if i == 3:
            parts[0] = "N" * (len(parts[0]) - 1) + "G"  # one known base in a window
        records.append((f"c{i + 1}", "".join(parts)))
    records.append(("allN", "N" * (2 * w + 3)))
    return records


def tiny(checks, binary, work):
    rng = np.random.default_rng(1106)
    for profile in tiny_profiles():
        name = profile["name"]
        hmm = WindowHMM(profile)
        path = os.path.join(work, f"{name}.json")
        with open(path, "w", encoding="utf-8") as f:
            json.dump(profile, f)
        records = tiny_contigs(rng, hmm.window, hmm.S)
        fasta = os.path.join(work, f"{name}.fa")
        tmtest.write_fasta(fasta, records, width=13)
        lengths = {n: len(s) for n, s in records}
        expected = {}
        for rec, seq in records:
            gc, known = window_counts(seq, hmm.window)
            log_em = hmm.log_emissions(gc, known)
            expected[rec] = enumerate_paths(hmm, log_em)
            # The numpy forward-backward used on chrX below is itself checked here.
            fb_ll, fb_post = forward_backward(hmm, log_em)
            checks.check(relative(fb_ll, expected[rec][0]) <= LIKELIHOOD_TOL and
                         np.abs(fb_post - expected[rec][1]).max() <= POSTERIOR_TOL,
                         f"{name} {rec}: the numpy forward-backward agrees with enumeration", ENUM)
        reported = [r for r, rep in zip(hmm.regions, hmm.reported) if rep]

        for block in ["0", "1", "3"]:
            tag = f"{name} --block {block}"
            out = os.path.join(work, f"{name}-b{block}")
            tmtest.run(binary, ["scan", "-q", "-p", path, fasta, "--block", block, "-o", out + ".bed",
                                "--summary", out + ".json", "--posteriors", out, "--posterior-digits", "12"])
            summary = tmtest.read_json(out + ".json")
            worst_ll, worst_post = 0.0, 0.0
            for c in summary["contigs"]:
                worst_ll = max(worst_ll, relative(c["log_likelihood"], expected[c["name"]][0]))
            for r in reported:
                got = tmtest.read_bedgraph(f"{out}.{r}.bedgraph", lengths)
                k = hmm.regions.index(r)
                for rec, seq in records:
                    want = expand_to_bases(expected[rec][1][:, k], hmm.window, len(seq))
                    worst_post = max(worst_post, float(np.abs(got[rec] - want).max()))  # NaN (a gap) fails
            checks.at_most(worst_ll, LIKELIHOOD_TOL, f"{tag}: log-likelihood of every contig (relative)", ENUM)
            checks.check(worst_post <= POSTERIOR_TOL, f"{tag}: per-base posteriors of every reported region",
                         ENUM, f"largest difference {worst_post:.3g} (limit {POSTERIOR_TOL:.0e})")

        for block in ["0", "2"]:
            tag = f"{name} --decode viterbi --block {block}"
            out = os.path.join(work, f"{name}-v{block}")
            tmtest.run(binary, ["scan", "-q", "-p", path, fasta, "--decode", "viterbi", "--block", block,
                                "-o", out + ".bed", "--summary", out + ".json", "--posteriors", out])
            summary = tmtest.read_json(out + ".json")
            tracks = {r: tmtest.read_bedgraph(f"{out}.{r}.bedgraph", lengths) for r in reported}
            worst_ll, worst_path, unique = 0.0, 0.0, 0
            for c in summary["contigs"]:
                rec = c["name"]
                _, _, best, best_of = expected[rec]
                worst_ll = max(worst_ll, relative(c["log_likelihood"], best))
                # The reported region path (from the 0/1 tracks, one value per window) must be one
                # whose best state path reaches the maximum.
                n_windows = math.ceil(lengths[rec] / hmm.window)
                # Tracks leave out runs of >= 100 unknown bases (README): a window is read at its
                # first base that a track covers; a window the tracks do not cover at all could be
                # in any region (its bases are all unknown), so it matches every path.
                region_path = []
                for w in range(n_windows):
                    lo, hi = w * hmm.window, min(lengths[rec], (w + 1) * hmm.window)
                    covered = [b for b in range(lo, hi) if not np.isnan(tracks[reported[0]][rec][b])]
                    if not covered:
                        region_path.append(None)
                        continue
                    b = covered[0]
                    if len(hmm.regions) == len(reported):
                        region_path.append(int(np.argmax([tracks[r][rec][b] for r in hmm.regions])))
                    else:  # one unreported region: it holds the windows no reported region holds
                        hidden = next(k for k, rep in enumerate(hmm.reported) if not rep)
                        region_path.append(next((hmm.regions.index(r) for r in reported if tracks[r][rec][b] == 1.0),
                                                hidden))
                reached = max((lp for path, lp in best_of.items()
                               if all(a is None or a == b for a, b in zip(region_path, path))), default=-math.inf)
                worst_path = max(worst_path, relative(reached, best))
                unique += sum(1 for lp in best_of.values() if lp >= best - 1e-9) == 1
            checks.at_most(worst_ll, LIKELIHOOD_TOL, f"{tag}: best-path log-likelihood of every contig", ENUM)
            checks.check(worst_path <= LIKELIHOOD_TOL, f"{tag}: the region path reached the best path's probability",
                         ENUM, f"{unique} of {len(summary['contigs'])} contigs have a unique best region path")


# ------------------------------------------------------------------------------------------------
# (b) real windows against numpy/scipy, (c) acceptance figures

def read_bedgraph_runs(path):
    """(chrom, start, end, value) rows of a bedGraph, without expanding them."""
    rows = []
    with open(path, encoding="utf-8") as f:
        for line in f:
            if line.strip() and not line.startswith(("#", "track", "browser")):
                c, s, e, v = line.split("\t")
                rows.append((c, int(s), int(e), float(v)))
    return rows


def is_gap(seq, begin, end):
    """True when [begin, end) is a run of at least 100 unknown bases, which tracks leave out
    (README: assembly gaps carry no data)."""
    return end - begin >= 100 and not any(ch in "ACGTacgt" for ch in seq[begin:end])


def compare_tracks(prefix, hmm, record, seq, post):
    """Largest difference between the bedGraph tracks (every base outside long unknown runs) and
    the window posteriors; infinite when a track leaves out anything else."""
    worst = 0.0
    length = len(seq)
    for k, r in enumerate(hmm.regions):
        if not hmm.reported[k]:
            continue
        end = 0
        for c, s, e, v in read_bedgraph_runs(f"{prefix}.{r}.bedgraph"):
            if c != record or s < end or (s > end and not is_gap(seq, end, s)):
                return math.inf
            end = e
            lo, hi = s // hmm.window, (e - 1) // hmm.window  # windows holding bases [s, e)
            worst = max(worst, float(np.abs(post[lo:hi + 1, k] - v).max()))
        if end != length and not is_gap(seq, end, length):
            return math.inf
    return worst


def real(checks, binary, work, seq):
    plain = os.path.join(work, "chrX.fa")  # plain FASTA: region reads need an index
    tmtest.write_fasta(plain, [("X", seq)], width=60)
    known_all = sum(seq.count(b) for b in "ACGT")

    # 1. The built-in isochore profile (20-kb windows, 10-window chains) on the whole record.
    isochore = json.loads(tmtest.run(binary, ["profiles", "show", "isochore"]))
    hmm = WindowHMM(isochore)
    out = os.path.join(work, "iso")
    tmtest.run(binary, ["scan", "-q", "-p", "isochore", CHRX, "-o", out + ".bed", "--summary", out + ".json",
                        "--posteriors", out, "--posterior-digits", "12"])
    gc, known = window_counts(seq, hmm.window)
    ll, post = forward_backward(hmm, hmm.log_emissions(gc, known, exact=False))
    summary = tmtest.read_json(out + ".json")["contigs"][0]
    checks.equal(summary["length"], len(seq), "chrX record length", PYTHON)
    got = summary["log_likelihood"]
    checks.at_most(relative(got, ll), REAL_TOL, f"isochore, chrX 1-70 Mb ({len(gc)} windows): log-likelihood", SCIPY)
    checks.at_most(compare_tracks(out, hmm, "X", seq, post), REAL_TOL,
                   "isochore, chrX 1-70 Mb: per-base posteriors of the five families", SCIPY)
    acceptance(checks, out + ".bed", seq, known_all)

    # 2. A profile without chains on another window size, through a region of an indexed file.
    flat = json.loads(json.dumps(isochore))
    flat["name"] = "isochore-flat"
    flat["window"]["size"] = 5000
    for r in flat["regions"]:
        r.pop("min_length", None)
    for s in flat["states"]:
        s["gc"]["dispersion"] *= 2
    path = os.path.join(work, "flat.json")
    with open(path, "w", encoding="utf-8") as f:
        json.dump(flat, f)
    hmm = WindowHMM(flat)
    out = os.path.join(work, "flat")
    tmtest.run(binary, ["scan", "-q", "-p", path, plain, "-r", "X:1-10000000", "-o", out + ".bed",
                        "--summary", out + ".json", "--posteriors", out, "--posterior-digits", "12"])
    piece = seq[:10_000_000]
    gc, known = window_counts(piece, hmm.window)
    ll, post = forward_backward(hmm, hmm.log_emissions(gc, known, exact=False))
    summary = tmtest.read_json(out + ".json")["contigs"][0]
    checks.at_most(relative(summary["log_likelihood"], ll), REAL_TOL,
                   f"no chains, 5-kb windows, chrX:1-10000000 ({len(gc)} windows): log-likelihood", SCIPY)
    checks.at_most(compare_tracks(out, hmm, "X", piece, post), REAL_TOL,
                   "no chains, 5-kb windows, chrX:1-10000000: per-base posteriors", SCIPY)
    switches = int((np.diff(post.argmax(axis=1)) != 0).sum())
    checks.check(switches > 10, "no chains: the comparison covers many family switches", SCIPY, f"{switches}")
    return plain


def dynamic_range(checks, binary, work):
    """20-kb windows under narrow beta-binomials (rho 3e-4 and 1e-4, the range of the built-in
    isochore's) with 10-window chains: three GC-rich windows inside an AT-rich stretch. The
    AT-rich path that the chain of the GC-rich family forces aside falls thousands of nats behind
    and wins in the end; decoders on scaled probabilities lose it (scan wrote tracks with holes
    at 3e-4 and called the contig impossible at 1e-4)."""
    rng = np.random.default_rng(5)

    def window(q):
        return "".join(rng.choice(list("ACGT"), size=20000, p=[(1 - q) / 2, q / 2, q / 2, (1 - q) / 2]))

    seq = "".join(window(0.35) for _ in range(15)) + "".join(window(0.55) for _ in range(3))
    seq += "".join(window(0.35) for _ in range(15))
    fasta = os.path.join(work, "spike.fa")
    tmtest.write_fasta(fasta, [("spike", seq)])
    for rho in [3e-4, 1e-4]:
        profile = {
            "format": "tidemark-profile/1", "name": "spike", "window": {"size": 20000},
            "regions": [{"name": "lo", "report": True, "min_length": 200000},
                        {"name": "hi", "report": True, "min_length": 200000}],
            "states": [{"name": "lo", "region": "lo", "gc": {"mean": 0.35, "dispersion": rho}},
                       {"name": "hi", "region": "hi", "gc": {"mean": 0.55, "dispersion": rho}}],
            "initial": {"lo": 0.5, "hi": 0.5},
            "transitions": {"lo": {"lo": 0.98, "hi": 0.02}, "hi": {"lo": 0.02, "hi": 0.98}},
        }
        path = os.path.join(work, f"spike-{rho}.profile.json")
        with open(path, "w", encoding="utf-8") as f:
            json.dump(profile, f)
        hmm = WindowHMM(profile)
        gc, known = window_counts(seq, hmm.window)
        log_em = hmm.log_emissions(gc, known)
        ll, post = forward_backward(hmm, log_em)
        out = os.path.join(work, f"spike-{rho}")
        tmtest.run(binary, ["scan", "-q", "-p", path, fasta, "-o", out + ".bed", "--summary", out + ".json",
                            "--posteriors", out, "--posterior-digits", "12"])
        got = tmtest.read_json(out + ".json")["contigs"][0]["log_likelihood"]
        tag = f"GC spike, rho {rho}"
        checks.at_most(relative(got, ll), REAL_TOL, f"{tag}: log-likelihood", NUMPY)
        checks.at_most(compare_tracks(out, hmm, "spike", seq, post), REAL_TOL, f"{tag}: per-base posteriors",
                       NUMPY)
        best, regions = viterbi(hmm, log_em)
        tmtest.run(binary, ["scan", "-q", "-p", path, fasta, "--decode", "viterbi", "-o", out + ".v.bed",
                            "--summary", out + ".v.json"])
        got = tmtest.read_json(out + ".v.json")["contigs"][0]["log_likelihood"]
        checks.at_most(relative(got, best), REAL_TOL, f"{tag}: Viterbi log-likelihood",
                       "max-plus Viterbi in log space written here in numpy")
        calls = [(int(r[1]) // hmm.window, int(r[2]) // hmm.window, r[3]) for r in tmtest.read_bed(out + ".v.bed")]
        called = [None] * len(regions)
        for b, e, name in calls:
            for t in range(b, e):
                called[t] = hmm.regions.index(name)
        checks.equal(called, regions, f"{tag}: Viterbi regions per window",
                     "max-plus Viterbi in log space written here in numpy")


def acceptance(checks, bed, seq, known_all):
    a = np.frombuffer(seq.encode("ascii"), dtype=np.uint8)
    known = np.concatenate([[0], np.cumsum(np.isin(a, np.frombuffer(b"ACGT", dtype=np.uint8)))])
    gc = np.concatenate([[0], np.cumsum(np.isin(a, np.frombuffer(b"CG", dtype=np.uint8)))])
    calls = sorted((int(r[1]), int(r[2]), r[3], float(r[8])) for r in tmtest.read_bed(bed))
    print(f"# isochore on chrX 1-70 Mb: {len(calls)} calls", flush=True)
    called = sum(int(known[e] - known[s]) for s, e, _, _ in calls)
    checks.check(called >= 0.95 * known_all, "calls tile >= 95 % of the known bases", ISSUE,
                 f"{100 * called / known_all:.2f} % of {known_all} known bases")
    median = float(np.median([e - s for s, e, _, _ in calls]))
    checks.check(median >= 300_000, "median call >= 300 kb", ISSUE + "; " + COSTANTINI + " (isochores >> 300 kb)",
                 f"median {median / 1000:.0f} kb")
    overlaps = sum(1 for x, y in zip(calls, calls[1:]) if y[0] < x[1])
    checks.equal(overlaps, 0, "no overlapping calls", ISSUE)
    worst_gc = max(abs(round((gc[e] - gc[s]) / (known[e] - known[s]), 4) - g) for s, e, _, g in calls)
    checks.at_most(worst_gc, 1e-9, "BED gc_fraction of every call (4 decimals)", PYTHON)
    in_range = sum(int(known[e] - known[s]) for s, e, f, g in calls
                   if FAMILY_RANGE[f][0] - 1 <= 100 * g <= FAMILY_RANGE[f][1] + 1)
    checks.check(in_range >= 0.9 * called, ">= 90 % of called bases in a call whose GC is in its family's range "
                 "+-1 point", ISSUE + "; " + FAMILY_SOURCE, f"{100 * in_range / called:.2f} %")

    def share(lo, hi, families):
        """Known bases of [lo, hi) (0-based) in calls of these families, over its known bases."""
        inside = sum(int(known[min(e, hi)] - known[max(s, lo)]) for s, e, f, _ in calls
                     if f in families and min(e, hi) > max(s, lo))
        return inside / int(known[hi] - known[lo])

    par1 = share(PAR1[0] - 1, PAR1[1], {"H1", "H2", "H3"})
    checks.check(par1 > 0.5, "PAR1 mostly in H families", ISSUE + "; " + PAR1_SOURCE, f"{100 * par1:.1f} %")
    low = share(3_900_000, 5_000_000, {"L1", "L2"})
    checks.check(low > 0.5, "chrX 3.9-5.0 Mb mostly in L families", ISSUE, f"{100 * low:.1f} %")


# ------------------------------------------------------------------------------------------------
# 3. threads and shards

def same_outputs(checks, binary, work, seq):
    """Several chrX pieces as records (one shorter than a window, one with a soft-masked stretch,
    one all N): --threads 1/2/3 and --shard I/3 + merge against each other, byte for byte."""
    cuts = [(0, 2_600_000), (3_000_000, 4_700_000), (9_000_000, 9_013_000), (20_000_000, 25_200_000),
            (40_000_000, 40_450_000)]
    records = [(f"x{i + 1}", seq[b:e]) for i, (b, e) in enumerate(cuts)]
    name, text = records[3]
    records[3] = (name, text[:100_000] + text[100_000:400_000].lower() + text[400_000:])
    records.append(("gap", "N" * 45_000))
    fasta = os.path.join(work, "pieces.fa")
    tmtest.write_fasta(fasta, records)
    runs = {}
    for threads in [1, 2, 3]:
        d = os.path.join(work, f"t{threads}")
        common = ["scan", "-q", "-p", "isochore", "-t", str(threads), fasta]
        tmtest.run_in(binary, d, common + ["-o", "calls.bed", "--bed-style", "browser", "--gff3", "calls.gff3",
                                           "--summary", "summary.json", "--report", "report.json",
                                           "--chrom-sizes", "sizes.txt", "--posteriors", "p",
                                           "--posterior-digits", "9"])
        tmtest.run_in(binary, d, common + ["-o", "bin.bed", "--posteriors", "bw", "--track-format", "bigwig",
                                           "--bin", "1000"])
        tmtest.run_in(binary, d, common + ["-o", "viterbi.bed", "--decode", "viterbi", "--summary", "viterbi.json"])
        files = {}
        for f in sorted(os.listdir(d)):
            data = tmtest.read_bytes(os.path.join(d, f))
            if f == "report.json":
                doc = json.loads(data)
                doc.pop("resources")
                data = json.dumps(doc, sort_keys=True).encode()
            files[f] = data
        runs[threads] = files
    for threads in [2, 3]:
        differ = [f for f in runs[1] if runs[threads].get(f) != runs[1][f]]
        checks.check(set(runs[threads]) == set(runs[1]) and not differ,
                     f"isochore, {len(records)} records: --threads {threads} writes the same {len(runs[1])} files",
                     ONE, ", ".join(differ))
    out = {"bed": "calls.bed", "gff3": "calls.gff3", "tracks": [f"post.{r}.bedgraph" for r in FAMILY_RANGE]}
    summaries, owner = scenario(checks, binary, work, "isochore-shards", fasta, 3,
                                ["-p", "isochore", "-o", "calls.bed", "--summary", "summary.json", "--report",
                                 "report.json", "--posteriors", "post", "--posterior-digits", "9", "--gff3",
                                 "calls.gff3", "-q"], out)
    checks.check(all(len(v) == 1 for v in owner.values()) and sorted(owner) == list(range(len(records))),
                 "isochore shards: every record decoded by exactly one shard (window profiles never split records)",
                 "records of the FASTA written here")


def body(checks, binary, work):
    tiny(checks, binary, work)
    dynamic_range(checks, binary, work)
    seq = tmtest.read_fasta(CHRX)[0][1]
    real(checks, binary, work, seq)
    same_outputs(checks, binary, work, seq)


if __name__ == "__main__":
    tmtest.main("window profiles: enumeration, numpy forward-backward, isochore acceptance, threads and shards", body)
