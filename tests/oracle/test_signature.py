"""Window signatures (Dirichlet-Markov k-mer emissions, profile.hpp WindowSignature): `tidemark
scan`'s log-likelihood and per-base posteriors on E. coli 536 against an independent numpy/scipy
implementation of the documented likelihood (scipy.special.gammaln, k-mers counted in numpy,
forward-backward in log space from test_window.py), alone and multiplied with the G+C term; and
scan, a 3-shard scan + merge and a 3-shard distributed fit give the same bytes as one process
and any thread count."""

import copy
import json
import os
import sys

import numpy as np
from scipy.special import gammaln, logsumexp
from scipy.stats import betabinom

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402
from test_shard_fit import distributed  # noqa: E402
from test_shard_merge import scenario  # noqa: E402
from test_window import WindowHMM, compare_tracks, forward_backward, relative  # noqa: E402

ECOLI = "/usr/share/doc/bowtie/examples/genomes/NC_008253.fna.gz"  # bowtie-examples
SCIPY = ("Polya sequence probability per context with scipy.special.gammaln, strands averaged, 1/4 per chain "
         "start (profile.hpp), k-mers counted in numpy; forward-backward over windows in log space (numpy/scipy)")
ONE = "the same command with --threads 1 (outputs must not depend on the thread count)"
SINGLE = "the single-process fit of the same data (EM statistics are sums over records)"
REAL_TOL = 1e-9


class SignatureHMM(WindowHMM):
    """A window profile whose states carry a signature (and perhaps gc), read from its JSON."""

    def __init__(self, profile):
        plain = copy.deepcopy(profile)
        self.with_gc = "gc" in profile["states"][0]
        for s in plain["states"]:
            s.setdefault("gc", {"mean": 0.5, "dispersion": 0.5})
        super().__init__(plain)
        self.k = profile["states"][0]["signature"]["k"]
        self.sig_alpha = []
        for s in profile["states"]:
            sig = s["signature"]
            conc = sig["concentration"]
            conc = np.array(conc if isinstance(conc, list) else [conc] * len(sig["mean"]), dtype=float)
            self.sig_alpha.append(conc[:, None] * np.array(sig["mean"], dtype=float))  # contexts x 4

    def log_emissions_of(self, seq):
        gc_counts, known, kmers = counts(seq, self.window, self.k)
        out = np.zeros((len(known), self.S))
        rc = kmers[:, rc_permutation(self.k)]
        chain_starts = known - kmers.sum(axis=1)
        for s in range(self.S):
            a = self.sig_alpha[s]
            f = polya(kmers, a)
            r = polya(rc, a)
            out[:, s] = np.logaddexp(f, r) - np.log(2) - chain_starts * np.log(4)
            if self.with_gc:
                out[:, s] += betabinom.logpmf(gc_counts, known, self.alpha[s], self.beta[s])
        out[known < self.min_known, :] = 0.0
        return out


def polya(kmers, alpha):
    """sum over contexts of ln Gamma(A) - ln Gamma(A + n) + sum_b ln Gamma(a_b + n_b) - ln Gamma(a_b)."""
    n = kmers.reshape(len(kmers), -1, 4).astype(float)
    a = alpha[None, :, :]
    A = alpha.sum(axis=1)[None, :]
    per_context = gammaln(A) - gammaln(A + n.sum(axis=2)) + (gammaln(a + n) - gammaln(a)).sum(axis=2)
    return per_context.sum(axis=1)


def rc_permutation(k):
    """Column order that turns k-mer counts into the counts of their reverse complements."""
    perm = np.zeros(4 ** k, dtype=int)
    for code in range(4 ** k):
        digits = [(code >> (2 * (k - 1 - i))) & 3 for i in range(k)]
        rc = 0
        for d in reversed(digits):
            rc = rc * 4 + (3 - d)
        perm[rc] = code
    return perm


def counts(seq, w, k):
    """Per window [t w, (t+1) w): G+C, known bases, and k-mers of k consecutive known bases that
    lie inside the window (A<C<G<T, oldest base most significant)."""
    lut = np.full(256, 4, dtype=np.int64)
    for i, ch in enumerate("ACGT"):
        lut[ord(ch)] = i
        lut[ord(ch.lower())] = i
    b = lut[np.frombuffer(seq.encode("ascii"), dtype=np.uint8)]
    L = len(b)
    starts = np.arange(0, L, w)
    known_mask = b < 4
    gc = np.add.reduceat(((b == 1) | (b == 2)).astype(np.int64), starts)
    known = np.add.reduceat(known_mask.astype(np.int64), starts)
    m = L - k + 1
    code = np.zeros(m, dtype=np.int64)
    ok = np.ones(m, dtype=bool)
    for i in range(k):
        code = code * 4 + np.where(known_mask[i:i + m], b[i:i + m], 0)
        ok &= known_mask[i:i + m]
    pos = np.arange(m)
    ok &= (pos // w) == ((pos + k - 1) // w)  # inside one window
    kmers = np.zeros((len(starts), 4 ** k), dtype=np.int64)
    np.add.at(kmers, (pos[ok] // w, code[ok]), 1)
    return gc, known, kmers


def scan_and_compare(checks, binary, work, profile_path, fasta, seq, record, tag):
    profile = tmtest.read_json(profile_path)
    hmm = SignatureHMM(profile)
    hmm.min_known = profile["window"].get("min_known", 1)
    out = os.path.join(work, tag)
    tmtest.run(binary, ["scan", "-q", "-p", profile_path, fasta, "-o", out + ".bed", "--summary", out + ".json",
                        "--posteriors", out, "--posterior-digits", "12"])
    ll, post = forward_backward(hmm, hmm.log_emissions_of(seq))
    got = tmtest.read_json(out + ".json")["contigs"][0]["log_likelihood"]
    checks.at_most(relative(got, ll), REAL_TOL, f"{tag}: log-likelihood of E. coli 536", SCIPY)
    checks.at_most(compare_tracks(out, hmm, record, seq, post), REAL_TOL, f"{tag}: per-base posteriors", SCIPY)


def body(checks, binary, work):
    record, seq = tmtest.read_fasta(ECOLI)[0]
    fasta = os.path.join(work, "ecoli.fa")
    tmtest.write_fasta(fasta, [(record, seq)])

    # 1. The composition-shift template after 2 EM iterations (contexts of different concentration).
    fitted = os.path.join(work, "cs.json")
    tmtest.run(binary, ["fit", fasta, "-p", "composition-shift", "--max-iter", "2", "-o", fitted, "-q"])
    scan_and_compare(checks, binary, work, fitted, fasta, seq, record.split()[0], "composition-shift, fitted")

    # 2. k = 2 and k = 4 with the G+C term multiplied in, a window of 3 kb, no chains.
    for k in (2, 4):
        contexts = 4 ** (k - 1)
        rng = np.random.default_rng(k)
        states = []
        for name, conc, mean, rho in (("odd", 40.0, 0.47, 0.01), ("own", 900.0, 0.51, 0.001)):
            rows = rng.dirichlet([20, 30, 30, 20], size=contexts)
            states.append({"name": name, "region": name, "gc": {"mean": mean, "dispersion": rho},
                           "signature": {"k": k, "concentration": (conc * rng.uniform(0.5, 2, contexts)).tolist(),
                                         "mean": rows.tolist()}})
        profile = {"format": "tidemark-profile/1", "name": f"joint{k}", "window": {"size": 3000, "min_known": 1000},
                   "regions": [{"name": "odd", "report": True}, {"name": "own", "report": False}],
                   "states": states, "initial": {"odd": 0.1, "own": 0.9},
                   "transitions": {"odd": {"odd": 0.8, "own": 0.2}, "own": {"odd": 0.02, "own": 0.98}}}
        path = os.path.join(work, f"joint{k}.json")
        with open(path, "w", encoding="utf-8") as f:
            json.dump(profile, f)
        scan_and_compare(checks, binary, work, path, fasta, seq, record.split()[0], f"k {k} with gc, 3-kb windows")

    # 3. Threads, shards and the distributed fit on the genome cut into 4 records.
    pieces = [(f"part{i}", seq[i * 1_300_000:(i + 1) * 1_300_000]) for i in range(4)]
    multi = os.path.join(work, "multi.fa")
    tmtest.write_fasta(multi, pieces)
    runs = {}
    for threads in (1, 2):
        d = os.path.join(work, f"t{threads}")
        tmtest.run_in(binary, d, ["scan", multi, "-p", fitted, "-t", str(threads), "-q", "-o", "calls.bed",
                                  "--summary", "summary.json", "--posteriors", "p", "--posterior-digits", "9"])
        runs[threads] = {f: tmtest.read_bytes(os.path.join(d, f)) for f in sorted(os.listdir(d))}
    differ = [f for f in runs[1] if runs[2].get(f) != runs[1][f]]
    checks.check(set(runs[1]) == set(runs[2]) and not differ,
                 f"composition-shift scan: --threads 2 writes the same {len(runs[1])} files", ONE, ", ".join(differ))
    scenario(checks, binary, work, "signature-shards", multi, 3,
             ["-p", fitted, "-o", "calls.bed", "--summary", "summary.json", "--report", "report.json",
              "--posteriors", "post", "--posterior-digits", "9", "-q"],
             {"bed": "calls.bed", "tracks": ["post.atypical.bedgraph"]})
    single = os.path.join(work, "fit.single.json")
    tmtest.run(binary, ["fit", multi, "-p", fitted, "--max-iter", "2", "--tol", "0", "-o", single, "-q"])
    result = distributed(binary, work, multi, fitted, 3, 2, "composition-shift")
    a, b = tmtest.read_json(single), tmtest.read_json(result)
    for doc in (a, b):  # --from-stats keeps the start's region descriptions (text, not numbers)
        for r in doc["regions"]:
            r.pop("description", None)
    checks.at_most(tmtest.profile_difference(a, b), 1e-9,
                   "fitted composition-shift: 2 EM iterations over 3 shards equal the single-process fit", SINGLE)


if __name__ == "__main__":
    tmtest.main("window signatures: scipy likelihood on E. coli 536, threads, shards, distributed fit", body)
