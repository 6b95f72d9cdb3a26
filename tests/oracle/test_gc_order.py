"""Oracle: window classes named for a GC direction keep it (gc.below / gc.above, a constraint of
the M-step) on a real genome where they used to cross: E. coli K-12 MG1655 (Debian
ragout-examples), fitted with the README's recipe. Checks the log-likelihood history, the fitted
order, every call's measured GC against its name, and each constrained M-step against scipy's
constrained maximisation of the same expected log-likelihood; and the evidence rule on a draft's
short contigs."""

import gzip
import json
import os
import sys

import numpy as np
from scipy import optimize, special

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

K12 = "/usr/share/doc/ragout/examples/E.Coli/references/MG1655-K12.fasta.gz"  # ragout-examples
EM = "EM theory (Dempster, Laird & Rubin 1977): a step that does not lower Q does not lower L"
PYTHON = "G+C counted by Python over the FASTA"
SCIPY = ("scipy.optimize SLSQP on the weighted beta-binomial expected log-likelihood (scipy.special.betaln) "
         "under the profile's order constraints")


def q_state(k, n, w, mean, disp):
    total = 1 / disp - 1
    a, b = mean * total, (1 - mean) * total
    return float(np.sum(w * (special.betaln(k + a, n - k + b) - special.betaln(a, b))))


def constrained_optimum(k, n, weights, states, starts):
    """Maximum of sum_s Q_s(mean_s, disp_s) subject to each state's gc.below / gc.above, by SLSQP
    over (mean, log(alpha + beta)) per state from several starts; our own implementation."""
    names = [s["name"] for s in states]
    scale = max(1.0, sum(float(w.sum()) for w in weights))

    def unpack(x):
        return [(x[2 * i], 1 / (np.exp(x[2 * i + 1]) + 1)) for i in range(len(states))]

    def negq(x):
        return -sum(q_state(k, n, weights[i], m, d) for i, (m, d) in enumerate(unpack(x))) / scale

    cons = []
    for i, s in enumerate(states):
        for side, sign in (("below", -1), ("above", 1)):
            if side in s["gc"]:
                r = names.index(s["gc"][side])
                cons.append({"type": "ineq", "fun": lambda x, i=i, r=r, sign=sign: sign * (x[2 * i] - x[2 * r])})
    best = None
    for start in starts:
        x0 = np.array([v for m, d in start for v in (m, np.log(1 / d - 1))])
        res = optimize.minimize(negq, x0, method="SLSQP", constraints=cons,
                                bounds=[(1e-4, 1 - 1e-4), (np.log(1e-6), np.log(1e12))] * len(states),
                                options={"ftol": 1e-15, "maxiter": 2000})
        if best is None or res.fun < best.fun:
            best = res
    return unpack(best.x), -best.fun * scale


def body(checks, binary, work):
    fasta = os.path.join(work, "k12.fa")
    with gzip.open(K12, "rt") as f, open(fasta, "w") as out:
        out.write(f.read())
    seqs = dict(tmtest.read_fasta(fasta))
    folder = os.path.join(work, "recipe")
    tmtest.run_in(binary, folder, ["fit", fasta, "-p", "gc-shift", "-o", "P.json", "-t", "2", "-q"])
    tmtest.run_in(binary, folder, ["scan", fasta, "-p", "P.json", "-o", "calls.bed", "-q"])
    profile = tmtest.read_json(os.path.join(folder, "P.json"))
    states = {s["name"]: s for s in profile["states"]}

    history = [h["objective"] for h in profile["provenance"]["history"]]
    checks.check(len(history) >= 2 and all(b >= a - 1e-9 * abs(a) for a, b in zip(history, history[1:])),
                 "K-12: EM under the order constraint never lowers the log-likelihood", EM,
                 f"{len(history)} evaluations, {history[0]:.3f} -> {history[-1]:.3f}")
    for s in profile["states"]:
        for side, sign in (("below", -1), ("above", 1)):
            if side in s["gc"]:
                ref = states[s["gc"][side]]["gc"]["mean"]
                checks.check(sign * (s["gc"]["mean"] - ref) > 0,
                             f"K-12: fitted {s['name']} is strictly {side} {s['gc'][side]} (kept classes have a "
                             "direction)", "the profile's own gc." + side, f"{s['gc']['mean']:.4f} vs {ref:.4f}")
    for r in profile["regions"]:
        st = [s for s in profile["states"] if s["region"] == r["name"]][0]
        checks.check(r.get("description", "").startswith(f"G+C {st['gc']['mean']:.3f}"),
                     f"K-12: region {r['name']}'s description states its fitted G+C",
                     "the fitted state's gc.mean", r.get("description", ""))

    typical = states["typical"]["gc"]["mean"]
    calls = [(r[0], int(r[1]), int(r[2]), r[3]) for r in tmtest.read_bed(os.path.join(folder, "calls.bed"))]
    wrong = []
    for chrom, a, b, name in calls:
        piece = seqs[chrom][a:b].upper()
        known = sum(piece.count(x) for x in "ACGT")
        gc = (piece.count("G") + piece.count("C")) / max(1, known)
        if (name == "at_shifted" and gc >= typical) or (name == "gc_shifted" and gc <= typical):
            wrong.append(f"{name} {chrom}:{a}-{b} GC {gc:.3f}")
    checks.check(not wrong, "K-12: no call's region name contradicts its measured GC (typical "
                 f"{typical:.4f})", PYTHON, f"{len(calls)} calls; " + "; ".join(wrong[:5]))

    # The constrained M-step on K-12's own windows, step by step through --emit-stats/--from-stats
    # from the seeded template (transitions kept, as fit does for a template).
    folder = os.path.join(work, "steps")
    tmtest.run_in(binary, folder, ["fit", fasta, "-p", "gc-shift", "--max-iter", "0", "-o", "p0.json", "-q"])
    current, active, steps, worst, lls = "p0.json", 0, 0, None, []
    for step in range(25):
        tmtest.run_in(binary, folder, ["fit", fasta, "-p", current, "--emit-stats", "s.json", "-q", "-t", "2"])
        tmtest.run_in(binary, folder, ["fit", "--from-stats", "s.json", "--freeze", "transitions", "--freeze",
                                       "initial", "-o", f"p{step + 1}.json", "-q"])
        stats = tmtest.read_json(os.path.join(folder, "s.json"))
        used = json.loads(stats["profile"]) if isinstance(stats["profile"], str) else stats["profile"]
        nxt = tmtest.read_json(os.path.join(folder, f"p{step + 1}.json"))
        lls.append(stats["counts"]["log_likelihood"])
        windows = stats["counts"]["windows"]
        k = np.array([t[0] for t in windows], float)
        n = np.array([t[1] for t in windows], float)
        weights = [np.array([t[2][i] for t in windows]) for i in range(len(used["states"]))]
        before = [(s["gc"]["mean"], s["gc"]["dispersion"]) for s in used["states"]]
        got = [(s["gc"]["mean"], s["gc"]["dispersion"]) for s in nxt["states"]]
        q_got = sum(q_state(k, n, weights[i], m, d) for i, (m, d) in enumerate(got))
        q_before = sum(q_state(k, n, weights[i], m, d) for i, (m, d) in enumerate(before))
        tied = [(m, d) if i == 1 else (before[1][0], d) for i, (m, d) in enumerate(before)]
        ref, q_ref = constrained_optimum(k, n, weights, used["states"], [before, tied])
        gap = q_ref - q_got
        worst = gap if worst is None else max(worst, gap)
        ordered = got[0][0] <= got[1][0] <= got[2][0]
        active += got[0][0] == got[1][0] or got[2][0] == got[1][0]
        steps += 1
        if not (q_got >= q_before - 1e-9 * abs(q_before) and gap <= 1e-6 * abs(q_ref) and ordered):
            checks.check(False, f"K-12 M-step {step + 1}: the constrained maximum", SCIPY,
                         f"tidemark {got} Q {q_got:.6f} (before {q_before:.6f}), scipy {ref} Q {q_ref:.6f}")
            break
        current = f"p{step + 1}.json"
    checks.check(steps == 25, "K-12: every M-step keeps the order, does not lower Q and is no worse than "
                 "scipy's constrained maximum (relative 1e-6)", SCIPY,
                 f"{steps} steps, largest shortfall {worst:.3g} nats")
    checks.check(all(b >= a - 1e-9 * abs(a) for a, b in zip(lls, lls[1:])),
                 "K-12: the three-class model's log-likelihood never decreases across the constrained EM steps", EM,
                 f"{lls[0]:.3f} -> {lls[-1]:.3f} over {len(lls)} E-steps")
    checks.check(active > 0, "K-12: the order constraint was active in some M-step (the genome where classes "
                 "used to cross)", "issue 21: K-12 fitted gc_shifted 0.496 below typical 0.516 before",
                 f"{active} of {steps} steps")

    # The evidence rule: a 56-bp homopolymer contig and a 1-kb contig beside K-12 get no call.
    draft = os.path.join(work, "draft.fa")
    tmtest.write_fasta(draft, [("k12", seqs[next(iter(seqs))]), ("polyA", "A" * 56),
                               ("sliver", seqs[next(iter(seqs))][1000:2000].replace("G", "A").replace("C", "T"))])
    folder = os.path.join(work, "recipe")
    tmtest.run_in(binary, folder, ["scan", draft, "-p", "P.json", "-o", "draft.bed", "-q"])
    short = [r for r in tmtest.read_bed(os.path.join(folder, "draft.bed")) if r[0] in ("polyA", "sliver")]
    checks.check(not short, "a 56-bp homopolymer contig and a 1-kb all-A/T contig are not called (fewer known "
                 "bases than window.min_known: no evidence)", "README: the evidence rule", str(short))


if __name__ == "__main__":
    tmtest.main("classes that keep their GC direction (E. coli K-12)", body)
