"""Oracle, end to end: simulate from a profile, decode the simulation under the same (true)
profile by posterior decoding and by Viterbi, score both with `tidemark compare`. Posterior
decoding maximises the expected number of correctly labelled bases, so its per-base accuracy
must be at least Viterbi's; compare's accuracy is also recomputed base by base in Python."""

import json
import os
import sys

import numpy as np

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

# Decision theory of posterior decoding: labelling each base with its most probable region given
# the whole sequence maximises the expected number of correct labels (e.g. Durbin, Eddy, Krogh &
# Mitchison 1998, Biological Sequence Analysis, section 3.2, "posterior decoding"; from memory).
# With two regions, "most probable" is P(region) >= 0.5, i.e. scan --min-posterior 0.5 with no
# merging and no length filter.
THEORY = "posterior decoding maximises expected per-base accuracy (Durbin et al. 1998, s. 3.2)"

# A test profile with two regions that are separable on kilobase segments (GC 0.6 against 0.4),
# one of them made of two states, one of those of order 1, so that region_of_state and contexts
# both matter. The numbers are this test's choice.
PROFILE = {
    "format": "tidemark-profile/1",
    "name": "rich-poor",
    "description": "GC-rich against GC-poor segments of about 1 kb (test profile)",
    "regions": [{"name": "rich", "report": True}, {"name": "poor", "report": False}],
    "states": [
        {"name": "rich", "region": "rich", "order": 0, "emissions": [[0.2, 0.3, 0.3, 0.2]]},
        {"name": "poor_a", "region": "poor", "order": 0, "emissions": [[0.3, 0.2, 0.2, 0.3]]},
        {"name": "poor_b", "region": "poor", "order": 1,
         "emissions": [[0.4, 0.2, 0.2, 0.2], [0.3, 0.2, 0.2, 0.3], [0.3, 0.2, 0.2, 0.3], [0.2, 0.2, 0.2, 0.4]]},
    ],
    "initial": {"rich": 0.3, "poor_a": 0.4, "poor_b": 0.3},
    "transitions": {
        "rich": {"rich": 0.999, "poor_a": 0.0005, "poor_b": 0.0005},
        "poor_a": {"poor_a": 0.998, "poor_b": 0.001, "rich": 0.001},
        "poor_b": {"poor_b": 0.998, "poor_a": 0.001, "rich": 0.001},
    },
}


def per_base(rows, lengths, region):
    """Boolean per-base masks (per contig) of the rows naming region."""
    mask = {name: np.zeros(n, dtype=bool) for name, n in lengths.items()}
    for r in rows:
        if r[3] == region:
            mask[r[0]][int(r[1]):int(r[2])] = True
    return mask


def body(checks, tm, work):
    profile = os.path.join(work, "rich-poor.json")
    with open(profile, "w", encoding="utf-8") as f:
        json.dump(PROFILE, f)
    fa, truth = os.path.join(work, "sim.fa"), os.path.join(work, "truth.bed")
    tmtest.run(tm, ["simulate", "-p", profile, "--lengths", "1000000,1000000,1000000", "--gaps", "0.01",
                    "--gap-length", "100", "--seed", "31", "-o", fa, "--truth", truth])
    lengths = {name: len(seq) for name, seq in tmtest.read_fasta(fa)}
    truth_rows = tmtest.read_bed(truth)
    true_rich = per_base(truth_rows, lengths, "rich")
    accuracy = {}
    for mode in ("posterior", "viterbi"):
        calls, js = os.path.join(work, f"{mode}.bed"), os.path.join(work, f"{mode}.json")
        tmtest.run(tm, ["scan", "-p", profile, fa, "--decode", mode, "--min-posterior", "0.5", "--min-length", "1",
                        "--merge-gap", "0", "-o", calls, "-q"])
        tmtest.run(tm, ["compare", calls, truth, "--genome", fa, "--type", "rich", "--json", js])
        got = tmtest.read_json(js)["types"][0]["base"]
        accuracy[mode] = got["accuracy"]
        called = per_base(tmtest.read_bed(calls), lengths, "rich")
        correct = sum(int((called[n] == true_rich[n]).sum()) for n in lengths)
        expected = correct / sum(lengths.values())
        checks.check(abs(got["accuracy"] - expected) < 1e-12, f"{mode}: compare's accuracy", "per-base count in numpy",
                     f"{got['accuracy']:.6f} vs {expected:.6f}")
    checks.check(accuracy["posterior"] >= accuracy["viterbi"], "posterior per-base accuracy >= Viterbi's", THEORY,
                 f"posterior {accuracy['posterior']:.5f}, viterbi {accuracy['viterbi']:.5f}")
    # The profile separates the regions well: both decoders should be far better than chance
    # (0.5, the stationary share of each region), otherwise the comparison above says little.
    checks.check(accuracy["viterbi"] > 0.9, "the regions are separable on this data", "stationary share 0.5",
                 f"viterbi {accuracy['viterbi']:.4f}")


if __name__ == "__main__":
    tmtest.main("posterior decoding against Viterbi on simulated data", body)
