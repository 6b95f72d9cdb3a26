"""One Baum-Welch iteration of `tidemark fit` against pomegranate (Debian python3-pomegranate 0.14,
a general-purpose HMM library): order 0 through pomegranate's own update, order 1 through the
expanded model whose states are (region state, base) pairs.

What pomegranate 0.14.8 does, checked here rather than assumed: summarize() followed by one
from_summaries() is one Baum-Welch update; fit(max_iterations=1) performs two updates (its loop
updates once more before testing the iteration count) and fit(max_iterations=0) fails with
UnboundLocalError. Pseudocounts and inertia are switched off in every call."""

import json
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

from pomegranate import DiscreteDistribution, HiddenMarkovModel, State  # noqa: E402

BASES = "ACGT"
SOURCE = "pomegranate 0.14 Baum-Welch"
NO_SMOOTHING = dict(transition_pseudocount=0, emission_pseudocount=0, use_pseudocount=False,
                    edge_inertia=0, distribution_inertia=0)


def random_sequences(rng, lengths):
    """Sequences with composition drifting between an AT-rich and a GC-rich mix (so that two
    states have something to explain), from numpy's seeded generator."""
    out = []
    for n in lengths:
        seq = []
        gc = 0.4
        for i in range(n):
            if i % 250 == 0:
                gc = 0.3 if gc > 0.5 else 0.65
            p = np.array([(1 - gc) / 2, gc / 2, gc / 2, (1 - gc) / 2])
            seq.append(BASES[rng.choice(4, p=p)])
        out.append("".join(seq))
    return out


def profile_json(name, emissions, order, initial, transitions):
    names = ["hi", "lo"]
    return {
        "format": "tidemark-profile/1", "name": name,
        "regions": [{"name": "rich", "report": True}, {"name": "poor", "report": False}],
        "states": [{"name": names[i], "region": ["rich", "poor"][i], "order": order,
                    "emissions": emissions[i]} for i in range(2)],
        "initial": {names[i]: initial[i] for i in range(2)},
        "transitions": {names[i]: {names[j]: transitions[i][j] for j in range(2)} for i in range(2)},
    }


def fit(binary, work, fasta, start, iterations, tag):
    start_path = os.path.join(work, f"start-{tag}.json")
    out_path = os.path.join(work, f"fit-{tag}.json")
    with open(start_path, "w", encoding="utf-8") as f:
        json.dump(start, f)
    tmtest.run(binary, ["fit", fasta, "-p", start_path, "--max-iter", str(iterations), "--tol", "0",
                        "--pseudocount", "0", "-q", "-o", out_path])
    return tmtest.read_json(out_path)


def order0_model(start):
    """The order-0 profile as an ordinary pomegranate HMM (states named as in the profile)."""
    m = HiddenMarkovModel("order0")
    states = {}
    for s in start["states"]:
        states[s["name"]] = State(DiscreteDistribution(dict(zip(BASES, s["emissions"][0]))), name=s["name"])
    m.add_states(*states.values())
    for name, p in start["initial"].items():
        m.add_transition(m.start, states[name], p)
    for a, row in start["transitions"].items():
        for b, p in row.items():
            m.add_transition(states[a], states[b], p)
    m.bake()
    return m


def pomegranate_params(m):
    names = [s.name for s in m.states]
    T = m.dense_transition_matrix()
    start = names.index(m.start.name)
    out = {"initial": {}, "transitions": {}, "emissions": {}}
    for i, s in enumerate(m.states):
        if s.distribution is None:
            continue
        out["initial"][s.name] = T[start, i]
        out["transitions"][s.name] = {t.name: T[i, j] for j, t in enumerate(m.states) if t.distribution is not None}
        d = s.distribution.parameters[0]
        out["emissions"][s.name] = [d[b] for b in BASES]
    return out


def max_difference(fitted, expected):
    diffs = []
    for s in fitted["states"]:
        name = s["name"]
        diffs.append(abs(fitted["initial"].get(name, 0.0) - expected["initial"][name]))
        for t, p in expected["transitions"][name].items():
            diffs.append(abs(fitted["transitions"][name].get(t, 0.0) - p))
        for r, row in enumerate(s["emissions"]):
            diffs += [abs(x - y) for x, y in zip(row, expected["emissions"][name][r])]
    return max(diffs)


def check_order0(checks, binary, work, rng):
    seqs = random_sequences(rng, [3000, 2000])
    fasta = os.path.join(work, "order0.fa")
    tmtest.write_fasta(fasta, [(f"s{i}", s) for i, s in enumerate(seqs)])
    start = profile_json("order0", [[[0.2, 0.3, 0.3, 0.2]], [[0.3, 0.2, 0.2, 0.3]]], 0, [0.6, 0.4],
                         [[0.99, 0.01], [0.02, 0.98]])
    data = [list(s) for s in seqs]

    got = fit(binary, work, fasta, start, 1, "o0-1")
    m = order0_model(start)
    ll = sum(m.log_probability(s) for s in data)
    ll_tm = got["provenance"]["history"][0]["log_likelihood"]
    checks.check(abs(ll_tm - ll) <= 1e-9 * abs(ll), "order 0: log-likelihood of the start", SOURCE,
                 f"tidemark {ll_tm:.10f}, pomegranate {ll:.10f}")
    m.summarize(data)
    m.from_summaries(**NO_SMOOTHING)
    want = pomegranate_params(m)
    want["emissions"] = {k: [v] for k, v in want["emissions"].items()}
    d = max_difference(got, want)
    checks.at_most(d, 1e-6, "order 0: one update (summarize + from_summaries) equals tidemark --max-iter 1", SOURCE)

    got2 = fit(binary, work, fasta, start, 2, "o0-2")
    m2 = order0_model(start)
    m2.fit(data, algorithm="baum-welch", max_iterations=1, **NO_SMOOTHING)
    want2 = pomegranate_params(m2)
    want2["emissions"] = {k: [v] for k, v in want2["emissions"].items()}
    checks.at_most(max_difference(got2, want2), 1e-6,
                   "order 0: fit(max_iterations=1), which makes two updates, equals tidemark --max-iter 2", SOURCE)


def check_order1(checks, binary, work, rng):
    """Order 1 on the expanded model: state (r, a) emits a; (r, a) -> (s, b) has probability
    A[r][s] * E_s[a][b] and start -> (s, b) has initial[s] * mean_s[b] (base 0 has no context, so
    the profile's mean row applies). pomegranate's forward-backward gives the expected counts of
    every expanded edge; tidemark's update is then, by the definitions in train.hpp:
      initial[s]  ~ sum_b n(start -> (s, b))
      A[r][s]     ~ sum_{a,b} n((r, a) -> (s, b))
      E_s[a][b]   ~ sum_r n((r, a) -> (s, b)) + n(start -> (s, b)) * E_s[a][b] / sum_a' E_s[a'][b]
    where the last term shares base 0 among the rows (its context is latent and uniform)."""
    seqs = random_sequences(rng, [1500, 1000])
    fasta = os.path.join(work, "order1.fa")
    tmtest.write_fasta(fasta, [(f"t{i}", s) for i, s in enumerate(seqs)])
    E = [[[0.3, 0.2, 0.3, 0.2], [0.2, 0.35, 0.25, 0.2], [0.25, 0.3, 0.3, 0.15], [0.15, 0.3, 0.35, 0.2]],
         [[0.35, 0.15, 0.2, 0.3], [0.4, 0.2, 0.1, 0.3], [0.3, 0.2, 0.2, 0.3], [0.25, 0.2, 0.25, 0.3]]]
    A = [[0.97, 0.03], [0.05, 0.95]]
    pi = [0.3, 0.7]
    start = profile_json("order1", E, 1, pi, A)
    got = fit(binary, work, fasta, start, 1, "o1")

    m = HiddenMarkovModel("expanded")
    node = {}
    for r in range(2):
        for a in range(4):
            node[r, a] = State(DiscreteDistribution({b: 1.0 if i == a else 0.0 for i, b in enumerate(BASES)}),
                               name=f"{r}{BASES[a]}")
    m.add_states(*node.values())
    mean = [np.mean(np.array(E[s]), axis=0) for s in range(2)]
    for s in range(2):
        for b in range(4):
            m.add_transition(m.start, node[s, b], pi[s] * mean[s][b])
    for r in range(2):
        for a in range(4):
            for s in range(2):
                for b in range(4):
                    m.add_transition(node[r, a], node[s, b], A[r][s] * E[s][a][b])
    m.bake()
    index = {s.name: i for i, s in enumerate(m.states)}
    n_init = np.zeros(2)
    n_trans = np.zeros((2, 2))
    n_emit = np.zeros((2, 4, 4))
    ll = 0.0
    for seq in seqs:
        data = list(seq)
        ll += m.log_probability(data)
        T, _ = m.forward_backward(data)
        st = index[m.start.name]
        for s in range(2):
            for b in range(4):
                c0 = T[st, index[f"{s}{BASES[b]}"]]
                n_init[s] += c0
                col = np.array([E[s][a][b] for a in range(4)])
                n_emit[s, :, b] += c0 * col / col.sum()
        for r in range(2):
            for a in range(4):
                for s in range(2):
                    for b in range(4):
                        c = T[index[f"{r}{BASES[a]}"], index[f"{s}{BASES[b]}"]]
                        n_trans[r, s] += c
                        n_emit[s, a, b] += c
    ll_tm = got["provenance"]["history"][0]["log_likelihood"]
    checks.check(abs(ll_tm - ll) <= 1e-9 * abs(ll), "order 1: log-likelihood of the start (expanded model)", SOURCE,
                 f"tidemark {ll_tm:.10f}, pomegranate {ll:.10f}")
    names = ["hi", "lo"]
    want = {"initial": {names[s]: n_init[s] / n_init.sum() for s in range(2)},
            "transitions": {names[r]: {names[s]: n_trans[r, s] / n_trans[r].sum() for s in range(2)} for r in range(2)},
            "emissions": {names[s]: [list(n_emit[s, a] / n_emit[s, a].sum()) for a in range(4)] for s in range(2)}}
    checks.at_most(max_difference(got, want), 1e-6,
                   "order 1: tidemark --max-iter 1 equals the update from pomegranate's expected edge counts", SOURCE)


def body(checks, binary, work):
    rng = np.random.default_rng(20240611)
    check_order0(checks, binary, work, rng)
    check_order1(checks, binary, work, rng)


if __name__ == "__main__":
    tmtest.main("fit: one EM iteration against pomegranate", body)
