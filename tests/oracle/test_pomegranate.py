"""Oracle: `tidemark scan` posteriors, log-likelihoods and Viterbi paths against pomegranate 0.14's HMMs."""

import json
import os
import sys

import numpy as np
from pomegranate import DiscreteDistribution, HiddenMarkovModel, State

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

POMEGRANATE = "independent implementation: pomegranate 0.14"
BASES = "ACGT"
LAMBDA = "/usr/share/doc/bowtie2/examples/reference/lambda_virus.fa.gz"

POSTERIOR_TOL = 1e-6   # per-base absolute difference of region posteriors
LOGLIK_TOL = 1e-9      # relative difference of log-likelihoods
# Relative difference of a region's expected bases (sum of posteriors over the contig).
# pomegranate computes posteriors in log space, exp(f + b - logP) with |f|, |b| ~ 1e5 on these
# lengths, so each of its posteriors carries absolute errors of up to ~2e-8 (measured on all of
# lambda against a scaled forward-backward in numpy's 80-bit longdouble, while tidemark agreed
# with that to the 12 printed digits); summed over 50 kb that reaches ~1.4e-8 relative.
EXPECTED_BASES_TOL = 1e-7
CHECKPOINT_BLOCK = 997  # a small prime block size, so that every contig spans many checkpoints


# ---------------------------------------------------------------------------------------------
# Profiles as plain numpy tables, read from the profile JSON that tidemark itself prints.

class Tables:
    def __init__(self, profile):
        self.name = profile["name"]
        self.regions = [r["name"] for r in profile["regions"]]
        self.reported = [r["name"] for r in profile["regions"] if r["report"]]
        self.states = [s["name"] for s in profile["states"]]
        index = {s: i for i, s in enumerate(self.states)}
        self.region_of = [self.regions.index(s["region"]) for s in profile["states"]]
        self.order = [s["order"] for s in profile["states"]]
        self.rows = [np.array(s["emissions"], dtype=float) for s in profile["states"]]
        S = len(self.states)
        self.initial = np.zeros(S)
        for name, p in profile["initial"].items():
            self.initial[index[name]] = p
        self.trans = np.zeros((S, S))
        for a, row in profile["transitions"].items():
            for b, p in row.items():
                self.trans[index[a], index[b]] = p

    def mean_row(self, s):
        """The row tidemark uses where fewer than `order` known bases precede a position."""
        return self.rows[s].mean(axis=0)

    def emission(self, s, prev, b):
        """P(b | preceding base prev) in state s of order 0 or 1; prev None = no context."""
        if self.order[s] == 0:
            return self.rows[s][0][b]
        return self.mean_row(s)[b] if prev is None else self.rows[s][prev][b]


def expanded_hmm(t):
    """An order <= 1 region model as a zero-order pomegranate HMM over (state, base) pairs with
    deterministic emissions: (r,a)->(s,b) = A[r][s] * E_s[a][b] and start->(s,b) = pi_s * M_s[b].
    An unknown base N is the pair (s, N): it emits N with probability 1 in every state (weight 1,
    so rows out of (r,a) sum to 2: the model is a weighted automaton, which is what tidemark
    evaluates) and it leaves no context, so the next base uses the mean row.
    Returns the baked model and, per emitting state in pomegranate's order, its region-state."""
    symbols = BASES + "N"
    model = HiddenMarkovModel(t.name)
    pairs = {}
    for s in range(len(t.states)):
        for k, sym in enumerate(symbols):
            dist = DiscreteDistribution({x: (1.0 if x == sym else 0.0) for x in symbols})
            pairs[(s, k)] = State(dist, name=f"{t.states[s]}|{sym}")
    model.add_states(list(pairs.values()))
    for (s, k), state in pairs.items():
        w = t.initial[s] * (1.0 if k == 4 else t.emission(s, None, k))
        if w > 0:
            model.add_transition(model.start, state, w)
    for (r, a), src in pairs.items():
        prev = None if a == 4 else a
        for (s, k), dst in pairs.items():
            w = t.trans[r, s] * (1.0 if k == 4 else t.emission(s, prev, k))
            if w > 0:
                model.add_transition(src, dst, w)
    # merge="None": keep the weights as given (bake would otherwise renormalise each row)
    model.bake(merge="None")
    by_name = {st.name: s for (s, _), st in pairs.items()}
    state_of = np.array([by_name[st.name] for st in model.states if st.name in by_name])
    return model, state_of


def discrete_hmm(t):
    """An order-0 profile as an ordinary pomegranate HMM with discrete emissions."""
    model = HiddenMarkovModel(t.name)
    states = [State(DiscreteDistribution(dict(zip(BASES, t.rows[s][0]))), name=t.states[s])
              for s in range(len(t.states))]
    model.add_states(states)
    for s, st in enumerate(states):
        if t.initial[s] > 0:
            model.add_transition(model.start, st, t.initial[s])
        for j, dst in enumerate(states):
            if t.trans[s, j] > 0:
                model.add_transition(st, dst, t.trans[s, j])
    model.bake(merge="None")
    by_name = {st.name: s for s, st in enumerate(states)}
    state_of = np.array([by_name[st.name] for st in model.states if st.name in by_name])
    return model, state_of


# ---------------------------------------------------------------------------------------------
# Sequences

def markov_chain(rng, t, s, n, first=None):
    """n bases from state s of the profile alone (no switching): plants a region-like stretch."""
    out = np.empty(n, dtype=np.int64)
    u = rng.random(n)
    prev = first
    cum_mean = np.cumsum(t.mean_row(s))
    cum_rows = np.cumsum(t.rows[s], axis=1)
    for i in range(n):
        cum = cum_mean if prev is None or t.order[s] == 0 else cum_rows[prev]
        b = min(int(np.searchsorted(cum, u[i], side="right")), 3)
        out[i] = b
        prev = b
    return out


def sample_path(rng, t, n):
    """n bases sampled from an order-0 profile, switching states by its transitions."""
    S = len(t.states)
    s = rng.choice(S, p=t.initial)
    out = np.empty(n, dtype=np.int64)
    for i in range(n):
        out[i] = rng.choice(4, p=t.rows[s][0])
        s = rng.choice(S, p=t.trans[s])
    return out


def to_text(codes):
    return "".join(BASES[c] for c in codes)


def island_and_bulk_states(t):
    """The CpG-island profiles' states: those of region cpg_island, and the others (background)."""
    island = [s for s in range(len(t.states)) if t.regions[t.region_of[s]] == "cpg_island"]
    bulk = [s for s in range(len(t.states)) if t.regions[t.region_of[s]] != "cpg_island"]
    return island, bulk


def random_cpg_contigs(rng, t):
    islands, bulks = island_and_bulk_states(t)
    contigs = []
    # Background from a bulk chain with GC/CpG-rich stretches from an island chain planted in it,
    # so that posteriors run from near 0 to near 1 (each background state in turn).
    for k in range(3):
        island, bulk = islands[k % len(islands)], bulks[k % len(bulks)]
        n = int(rng.integers(10_000, 50_001))
        seq = markov_chain(rng, t, bulk, n)
        for _ in range(int(rng.integers(1, 4))):
            length = int(rng.integers(300, 3_000))
            at = int(rng.integers(0, n - length))
            seq[at:at + length] = markov_chain(rng, t, island, length, first=int(seq[at - 1]) if at else None)
        contigs.append((f"planted{k}", to_text(seq)))
    # Uniform iid bases: a sequence neither state describes well.
    n = int(rng.integers(10_000, 50_001))
    contigs.append(("uniform", to_text(rng.integers(0, 4, n))))
    # Independent GC-rich bases (no CpG depletion) from the very start: the contig begins in an island.
    n = int(rng.integers(10_000, 50_001))
    contigs.append(("gcrich", to_text(rng.choice(4, size=n, p=[0.15, 0.35, 0.35, 0.15]))))
    return contigs


def unknown_contig(rng, t):
    """Bulk - island - bulk (8 + 4 + 8 kb) with N at the very start and runs of 1 to 250 N, some
    inside the island stretch where the posterior is high and a broken context matters most."""
    islands, bulks = island_and_bulk_states(t)
    island, bulk = islands[0], bulks[0]
    seq = np.concatenate([markov_chain(rng, t, bulk, 8_000), markov_chain(rng, t, island, 4_000),
                          markov_chain(rng, t, bulk, 8_000)])
    s = list(to_text(seq))
    s[0:3] = "NNN"
    for at, length in ((500, 1), (8_300, 1), (9_000, 2), (10_000, 40), (11_500, 250), (15_000, 5)):
        s[at:at + length] = "N" * length
    return "".join(s)


# ---------------------------------------------------------------------------------------------
# Comparison

def random_order0_profile(rng):
    """A random three-state order-0 profile in two reported regions (alpha: a1, a2; beta: b1),
    drawn from rng: initial, transitions (0.9 on the diagonal), emissions."""
    S = 3
    initial = rng.dirichlet(np.ones(S))
    trans = 0.9 * np.eye(S) + 0.1 * rng.dirichlet(np.ones(S), size=S)
    emis = rng.dirichlet(np.ones(4), size=S)
    names = ["a1", "a2", "b1"]
    regions = ["alpha", "alpha", "beta"]
    return {
        "format": "tidemark-profile/1",
        "name": "random-order0",
        "description": "random three-state order-0 profile for the pomegranate oracle test",
        "regions": [{"name": "alpha", "report": True}, {"name": "beta", "report": True}],
        "states": [{"name": names[s], "region": regions[s], "order": 0, "emissions": [list(emis[s])]}
                   for s in range(S)],
        "initial": {names[s]: float(initial[s]) for s in range(S)},
        "transitions": {names[i]: {names[j]: float(trans[i, j]) for j in range(S)} for i in range(S)},
        "calling": {"min_posterior": 0.5, "min_length": 1, "merge_gap": 0},
    }


def scan(binary, workdir, tag, fasta, profile, decode, block=0):
    prefix = os.path.join(workdir, tag)
    args = ["scan", fasta, "--profile", profile, "--decode", decode, "--posteriors", prefix,
            "--posterior-digits", "12", "--summary", prefix + ".json", "-o", prefix + ".bed", "-q"]
    if block:
        args += ["--block", str(block)]
    tmtest.run(binary, args)
    return prefix


def compare(checks, binary, workdir, tag, t, contigs, profile_arg, build):
    """Writes contigs to FASTA, scans them (posterior at two block sizes, Viterbi) and compares
    every contig with pomegranate."""
    fasta = os.path.join(workdir, tag + ".fa")
    tmtest.write_fasta(fasta, contigs)
    lengths = {name: len(seq) for name, seq in contigs}
    model, state_of = build(t)
    runs = [("posterior", 0), ("posterior", CHECKPOINT_BLOCK), ("viterbi", 0), ("viterbi", CHECKPOINT_BLOCK)]
    outputs = {}
    for decode, block in runs:
        prefix = scan(binary, workdir, f"{tag}.{decode}.{block}", fasta, profile_arg, decode, block)
        tracks = {r: tmtest.read_bedgraph(f"{prefix}.{r}.bedgraph", lengths) for r in t.reported}
        summary = {c["name"]: c for c in tmtest.read_json(prefix + ".json")["contigs"]}
        outputs[(decode, block)] = (tracks, summary)

    oracle_max = {}
    for name, seq in contigs:
        symbols = list(seq)
        post = model.predict_proba(symbols)           # positions x emitting states
        logp = model.log_probability(symbols)
        vit_logp, vit_path = model.viterbi(symbols)
        # path[0] is the silent start state; emitting states come first in model.states
        vit_states = state_of[np.array([i for i, _ in vit_path[1:]])]
        region_of_state = np.array(t.region_of)
        first = t.regions.index(t.reported[0])
        oracle_max[name] = float(post[:, region_of_state[state_of] == first].sum(axis=1).max())
        for (decode, block), (tracks, summary) in outputs.items():
            where = f"{tag}/{name} ({len(seq)} bp, {decode}, block {block or 'auto'})"
            c = summary.get(name)
            if not checks.check(c is not None, f"{where}: contig in summary", "tidemark summary"):
                continue
            ll = c["log_likelihood"]
            expected_ll = logp if decode == "posterior" else vit_logp
            rel = abs(ll - expected_ll) / abs(expected_ll)
            checks.at_most(rel, LOGLIK_TOL,
                           f"{where}: log_likelihood {ll:.10f} vs {expected_ll:.10f}, relative difference",
                           POMEGRANATE)
            for r in t.reported:
                ri = t.regions.index(r)
                got = tracks[r][name]
                # Runs of >= 100 unknown bases are left out (no data); every other base has a value.
                gap = tmtest.long_unknown_runs(seq)
                if not checks.check(np.array_equal(np.isnan(got), gap),
                                    f"{where}: {r} bedGraph tiles the contig but its long unknown runs",
                                    "bedGraph definition: one value per base; unknown runs counted in Python"):
                    continue
                got = np.where(gap, 0.0, got)
                if decode == "posterior":
                    full = post[:, region_of_state[state_of] == ri].sum(axis=1)
                    expected = np.where(gap, 0.0, full)
                    diff = float(np.max(np.abs(got - expected)))
                    checks.at_most(diff, POSTERIOR_TOL, f"{where}: P({r}) max abs difference", POMEGRANATE)
                    # The summary's expected bases sum the posteriors over the known bases (README).
                    known = np.isin(np.frombuffer(seq.upper().encode(), dtype=np.uint8),
                                    np.frombuffer(b"ACGT", dtype=np.uint8))
                    want = float(full[known].sum())
                    eb = c["regions"][r]["expected_bases"]
                    checks.at_most(abs(eb - want) / max(1.0, want), EXPECTED_BASES_TOL,
                                   f"{where}: expected_bases of {r} {eb:.6f} vs {want:.6f} (known bases), relative",
                                   POMEGRANATE)
                else:
                    expected = np.where(gap, 0.0, (region_of_state[vit_states] == ri).astype(float))
                    mismatches = int(np.count_nonzero(got != expected))
                    checks.equal(mismatches, 0, f"{where}: bases where the {r} indicator differs from "
                                 "the Viterbi path", POMEGRANATE)
    return oracle_max


def body(checks, binary, workdir):
    rng = np.random.default_rng(20240611)

    # --- the built-in first-order CpG-island profiles, read from tidemark's own profile output:
    # the default (several background states) and the textbook two-state model
    for name in ("cpg-island", "cpg-island-2state"):
        cpg = Tables(json.loads(tmtest.run(binary, ["profiles", "show", name])))
        islands, bulks = island_and_bulk_states(cpg)
        checks.check(all(o == 1 for o in cpg.order) and islands and bulks,
                     f"{name} is a first-order island/background model this test expands", "test design")

        random_contigs = random_cpg_contigs(rng, cpg)
        top = compare(checks, binary, workdir, f"{name}.random", cpg, random_contigs, name, expanded_hmm)
        # Test design: the planted stretches must give the comparison posteriors well away from 0.
        checks.check(all(top[f"planted{k}"] > 0.9 for k in range(3)),
                     f"{name}: planted contigs reach P(cpg_island) > 0.9 somewhere",
                     "test design (oracle posteriors)", ", ".join(f"{k} {v:.3f}" for k, v in top.items()))

        lam = tmtest.read_fasta(LAMBDA)[0][1]
        pieces = [(0, 12_000), (12_000, 42_000), (30_000, 48_502), (0, 48_502)]
        lambda_contigs = [(f"lambda_{b}_{e}", lam[b:e]) for b, e in pieces]
        compare(checks, binary, workdir, f"{name}.lambda", cpg, lambda_contigs, name, expanded_hmm)

        # --- unknown bases: N emits 1 in every state and breaks the context (see expanded_hmm)
        n_contigs = [("with_n", unknown_contig(rng, cpg))]
        compare(checks, binary, workdir, f"{name}.unknown", cpg, n_contigs, name, expanded_hmm)

    # --- a random order-0 profile with three states in two reported regions
    profile = random_order0_profile(rng)
    path = os.path.join(workdir, "random-order0.json")
    with open(path, "w", encoding="utf-8") as f:
        json.dump(profile, f)
    t0 = Tables(profile)
    order0_contigs = [(f"sampled{k}", to_text(sample_path(rng, t0, n))) for k, n in enumerate((2_000, 5_000))]
    compare(checks, binary, workdir, "order0", t0, order0_contigs, path, discrete_hmm)


if __name__ == "__main__":
    tmtest.main("tidemark scan vs pomegranate 0.14", body)
