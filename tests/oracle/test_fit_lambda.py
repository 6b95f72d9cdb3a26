"""`tidemark fit` on real data, bacteriophage lambda (NC_001416.1, Debian bowtie2-examples):
the log-likelihood never decreases over EM iterations (Dempster, Laird & Rubin 1977, "Maximum
likelihood from incomplete data via the EM algorithm", J. R. Stat. Soc. B 39:1-38), the
recorded final log-likelihood equals an independent numpy forward algorithm on the written
profile, and template classes come out in increasing GC (computed here with numpy)."""

import os
import re
import subprocess
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

LAMBDA = "/usr/share/doc/bowtie2/examples/reference/lambda_virus.fa.gz"
EM = "EM monotonicity (Dempster, Laird & Rubin 1977)"
NUMPY = "numpy forward algorithm written here"
BASE = {"A": 0, "C": 1, "G": 2, "T": 3}


def forward_log_likelihood(profile, seq):
    """ln P(seq | profile) by the scaled forward algorithm, with the profile format's emission
    rule (row of the k preceding bases; their mean when fewer than k known bases precede; an
    unknown base emits 1). Profiles without min_length chains only."""
    states = profile["states"]
    names = [s["name"] for s in states]
    S = len(states)
    A = np.array([[profile["transitions"].get(a, {}).get(b, 0.0) for b in names] for a in names])
    pi = np.array([profile["initial"].get(a, 0.0) for a in names])
    tables = [np.array(s["emissions"]) for s in states]
    means = [t.mean(axis=0) for t in tables]
    orders = [s["order"] for s in states]
    codes = [BASE.get(c, 4) for c in seq]
    ll = 0.0
    f = None
    valid = 0
    for t, b in enumerate(codes):
        e = np.ones(S)
        if b < 4:
            for s in range(S):
                k = orders[s]
                if valid >= k:
                    row = 0
                    for c in codes[t - k:t]:
                        row = row * 4 + c
                    e[s] = tables[s][row, b]
                else:
                    e[s] = means[s][b]
        f = (pi if t == 0 else f @ A) * e
        z = f.sum()
        ll += np.log(z)
        f = f / z
        valid = valid + 1 if b < 4 else 0
    return ll


def stationary_gc(state):
    E = np.array(state["emissions"])
    if len(E) == 1:
        return E[0, 1] + E[0, 2]
    # order 1: the context chain is the 4x4 matrix E itself
    w, v = np.linalg.eig(E.T)
    p = np.real(v[:, np.argmin(np.abs(w - 1))])
    p = p / p.sum()
    return float(p @ (E[:, 1] + E[:, 2]))


def run_fit(binary, work, tag, args):
    out = os.path.join(work, f"{tag}.json")
    proc = subprocess.run([binary, "fit", LAMBDA, "-o", out] + args, capture_output=True, text=True)
    if proc.returncode != 0:
        raise tmtest.RunError(f"fit {' '.join(args)} exited with {proc.returncode}:\n{proc.stderr}")
    return tmtest.read_json(out), proc.stderr


def monotone(values, tolerance=1e-9):
    worst = 0.0
    for a, b in zip(values, values[1:]):
        worst = max(worst, (a - b) / abs(a))
    return worst <= tolerance, worst


def body(checks, binary, work):
    seq = tmtest.read_fasta(LAMBDA)[0][1]
    checks.equal(len(seq), 48502, "lambda genome length", "NC_001416.1 (shared/REFERENCES.md)")

    # Maximum likelihood (no pseudocounts): the log-likelihood itself must not decrease.
    for tag, args in [("classes3", ["--classes", "3", "--order", "1"]),
                      ("cpg", ["-p", "cpg-island"]),
                      ("classes2-order2", ["--classes", "2", "--order", "2"])]:
        prof, err = run_fit(binary, work, tag, args + ["--pseudocount", "0", "--max-iter", "25", "--tol", "0"])
        lls = [h["log_likelihood"] for h in prof["provenance"]["history"]]
        ok, worst = monotone(lls)
        checks.check(ok and len(lls) == 26, f"{tag}: log-likelihood non-decreasing over {len(lls) - 1} iterations",
                     EM, f"largest relative decrease {worst:.2e}; {lls[0]:.4f} -> {lls[-1]:.4f}")
        if tag == "classes2-order2":
            continue  # the numpy forward below handles orders 0 and 1 quickly enough
        ll = forward_log_likelihood(prof, seq)
        rec = prof["provenance"]["log_likelihood"]
        checks.check(abs(rec - ll) <= 1e-9 * abs(ll), f"{tag}: recorded log-likelihood of the written profile",
                     NUMPY, f"recorded {rec:.8f}, numpy {ll:.8f}")
        last = re.findall(r"iteration (\d+): log-likelihood (-?[0-9.]+)", err)[-1]
        checks.check(int(last[0]) == 25 and abs(float(last[1]) - ll) < 1e-5,
                     f"{tag}: last progress line on stderr", NUMPY, f"{last}")

    # With the default pseudocount EM increases log-likelihood + log-prior (MAP-EM, same source).
    prof, _ = run_fit(binary, work, "map", ["--classes", "3", "--order", "1", "--max-iter", "25", "--tol", "0"])
    obj = [h["objective"] for h in prof["provenance"]["history"]]
    ok, worst = monotone(obj)
    checks.check(ok, "pseudocount 1: log-likelihood + log-prior non-decreasing", EM, f"worst {worst:.2e}")
    gcs = [stationary_gc(s) for s in prof["states"]]
    checks.check(gcs == sorted(gcs) and [s["name"] for s in prof["states"]] == ["class1", "class2", "class3"],
                 "template classes named class1..3 in increasing GC", "numpy stationary distribution",
                 ", ".join(f"{g:.4f}" for g in gcs))

    # Restarts: the kept run is the best recorded one and its log-likelihood is the profile's.
    prof, _ = run_fit(binary, work, "restarts", ["-p", "cpg-island", "--restarts", "3", "--seed", "7",
                                                 "--max-iter", "15"])
    p = prof["provenance"]
    best = p["restart_log_likelihoods"][p["best_restart"] - 1]
    ll = forward_log_likelihood(prof, seq)
    checks.check(best == max(p["restart_log_likelihoods"]) and abs(best - ll) <= 1e-9 * abs(ll),
                 "restarts keep the best run", NUMPY, f"{p['restart_log_likelihoods']}, numpy {ll:.6f}")

    # A per-base three-class profile seeded from the data keeps its classes in GC order (the
    # per-base gc-shift of earlier releases, kept as a test fixture; the built-in is a window profile).
    per_base = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "data", "profiles",
                            "gc-shift-per-base.json")
    prof, _ = run_fit(binary, work, "gcshift", ["-p", per_base, "--init-from-data", "--init-window", "1000",
                                                "--max-iter", "20"])
    gc = {s["name"]: stationary_gc(s) for s in prof["states"]}
    checks.check(gc["at_shifted"] < gc["typical"] < gc["gc_shifted"],
                 "per-base gc-shift fitted on lambda: AT-shifted < typical < GC-shifted", "numpy stationary distribution",
                 ", ".join(f"{k} {v:.4f}" for k, v in gc.items()))


if __name__ == "__main__":
    tmtest.main("fit on lambda phage", body)
