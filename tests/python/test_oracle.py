"""The Python module against independent implementations: pomegranate 0.14's HMMs on the profiles
the oracle tests use (tests/oracle/test_pomegranate.py: the built-in first-order CpG-island
profiles expanded over (state, base) pairs, and a random order-0 profile), numpy for threads and
dtypes. Tolerances as in that test."""

import numpy as np
import pytest

import tidemark
from test_pomegranate import (LOGLIK_TOL, POMEGRANATE, POSTERIOR_TOL, Tables, discrete_hmm,
                              expanded_hmm, random_cpg_contigs, random_order0_profile, sample_path, to_text,
                              unknown_contig)


def oracle_compare(t, model, state_of, name, seq, profile):
    """Posteriors, log-likelihood and Viterbi path of one in-memory sequence against pomegranate."""
    symbols = list(seq)
    post = model.predict_proba(symbols)
    logp = model.log_probability(symbols)
    vit_logp, vit_path = model.viterbi(symbols)
    vit_states = state_of[np.array([i for i, _ in vit_path[1:]])]
    region_of_state = np.array(t.region_of)
    d = tidemark.decode(seq, profile, name=name, region_types=t.regions, threads=1)
    assert d.region_types == t.regions
    assert abs(d.log_likelihood - logp) / abs(logp) <= LOGLIK_TOL, f"{name}: {POMEGRANATE} log-likelihood"
    for ri, _ in enumerate(t.regions):
        expected = post[:, region_of_state[state_of] == ri].sum(axis=1)
        diff = float(np.max(np.abs(d.posteriors[:, ri] - expected)))
        assert diff <= POSTERIOR_TOL, f"{name}: {POMEGRANATE} posteriors of {t.regions[ri]}, max abs {diff:.3g}"
    v = tidemark.decode(seq, profile, name=name, method="viterbi", threads=1)
    assert abs(v.log_likelihood - vit_logp) / abs(vit_logp) <= LOGLIK_TOL, f"{name}: {POMEGRANATE} Viterbi score"
    assert v.path_regions == t.regions
    assert np.array_equal(v.path, region_of_state[vit_states]), f"{name}: {POMEGRANATE} Viterbi path"
    return float(d.posteriors[:, t.regions.index("cpg_island")].max()) if "cpg_island" in t.regions else None


@pytest.mark.parametrize("profile", ["cpg-island", "cpg-island-2state"])
def test_cpg_profiles_against_pomegranate(profile):
    rng = np.random.default_rng(20240611)
    t = Tables(__import__("json").loads(tidemark.load_profile(profile).to_json()))
    model, state_of = expanded_hmm(t)
    contigs = random_cpg_contigs(rng, t)[:2] + [("with_n", unknown_contig(rng, t))]
    tops = [oracle_compare(t, model, state_of, name, seq[:20_000], profile) for name, seq in contigs]
    assert max(tops) > 0.9, "test design: posteriors reach 0.9 somewhere"


def test_random_order0_profile_against_pomegranate(tmp_path):
    rng = np.random.default_rng(7)
    doc = random_order0_profile(rng)
    import json
    profile = tidemark.Profile.from_json(json.dumps(doc))
    assert profile.name == "random-order0" and [r["name"] for r in profile.regions] == ["alpha", "beta"]
    t = Tables(doc)
    model, state_of = discrete_hmm(t)
    for k, n in enumerate((2_000, 5_000)):
        oracle_compare(t, model, state_of, f"sampled{k}", to_text(sample_path(rng, t, n)), profile)


def test_threads_dtype_and_text_input_agree(tmp_path):
    """Segmented decoding on two threads, float32 and str/bytes/file input give the same numbers
    (numpy: array_equal, and float32 = float64 rounded by numpy's astype)."""
    contig = tidemark.simulate("cpg-island", 400_000, seed=4, gap_fraction=0.01)[0]
    one = tidemark.decode(contig.sequence, threads=1, block_size=4096, name=contig.name)
    two = tidemark.decode(contig.sequence.encode(), threads=2, block_size=4096, name=contig.name)
    assert np.array_equal(one.posteriors, two.posteriors), "numpy array_equal: threads never change results"
    assert one.bed() == two.bed()
    f32 = tidemark.decode(contig.sequence, dtype="float32", threads=1, block_size=4096)
    assert f32.posteriors.dtype == np.float32
    assert np.array_equal(f32.posteriors, one.posteriors.astype(np.float32)), "numpy astype(float32)"
    bare = tidemark.decode(contig.sequence, threads=1, block_size=4096, dtype=None, name=contig.name)
    assert bare.posteriors is None and bare.bed() == one.bed() and bare.log_likelihood == one.log_likelihood
    path = tmp_path / "one.fa"
    path.write_text(f">{contig.name}\n" + "\n".join(contig.sequence[i:i + 70]
                                                    for i in range(0, len(contig.sequence), 70)) + "\n")
    from_file = next(tidemark.decode_file(path, threads=1, block_size=4096))
    assert np.array_equal(from_file.posteriors, one.posteriors)
    assert from_file.log_likelihood == one.log_likelihood
    assert one.posteriors.flags["C_CONTIGUOUS"] and one.posteriors.shape == (len(contig.sequence), 1)
    # numpy's flags: the array is a view of the buffer the decoder wrote (no copy), kept by its base
    assert not one.posteriors.flags["OWNDATA"] and one.posteriors.base is not None


def test_records_iterate_one_at_a_time(tmp_path):
    contigs = tidemark.simulate("cpg-island-2state", [3000, 10, 2500], seed=9)
    path = tmp_path / "three.fa"
    path.write_text("".join(f">{c.name}\n{c.sequence}\n" for c in contigs))
    it = tidemark.decode_file(path, "cpg-island-2state")
    first = next(it)
    assert first.name == contigs[0].name and first.length == 3000
    rest = list(it)
    assert [d.name for d in rest] == [c.name for c in contigs[1:]]
    for d, c in zip([first] + rest, contigs):
        alone = tidemark.decode(c.sequence, "cpg-island-2state", name=c.name)
        assert np.array_equal(d.posteriors, alone.posteriors)


def test_records_hold_one_record_in_memory(cli, tmp_path):
    """Iterating over 12 records of 1.5 Mbp (float64 arrays of 12 MB each), keeping only the
    current Decoding: the process's peak RSS (getrusage ru_maxrss) once the second record is out
    (two arrays alive: the loop variable's and the next) grows by less than one array over the
    ten records after it, where keeping them would add 120 MB."""
    import os
    import resource
    if "libasan" in os.environ.get("LD_PRELOAD", ""):
        pytest.skip("AddressSanitizer keeps freed memory in quarantine")
    fasta = tmp_path / "twelve.fa"
    cli.run("simulate", "-q", "-p", "cpg-island", "--contigs", "12", "--length", "1500000", "--seed", "6",
            "-o", fasta)
    peaks = []
    for d in tidemark.decode_file(fasta, threads=1):
        assert d.posteriors.nbytes == 12_000_000
        peaks.append(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)
    assert len(peaks) == 12
    grown = peaks[-1] - peaks[1]
    assert grown < 12_000_000, f"peak RSS grew by {grown / 1e6:.0f} MB over records 3 to 12"


def test_calls_frame():
    pandas = pytest.importorskip("pandas")
    contig = tidemark.simulate("cpg-island", 150_000, seed=8)[0]
    d = tidemark.decode(contig.sequence, name=contig.name)
    frame = d.calls_frame()
    assert isinstance(frame, pandas.DataFrame) and len(frame) == len(d.calls) > 0
    assert list(frame.columns) == list(tidemark.Call._fields)
    # BED columns 2, 3 and 7 (mean posterior, 4 decimals) of the formatted lines
    rows = [line.split("\t") for line in d.bed().splitlines()]
    assert frame["start"].tolist() == [int(r[1]) for r in rows]
    assert [f"{x:.4f}" for x in frame["mean_posterior"]] == [r[6] for r in rows]


GIL_SCRIPT = r"""
import os, sys, threading
import numpy as np
import tidemark
fifo = sys.argv[1]
seq = tidemark.simulate("cpg-island", 200_000, seed=3)[0].sequence
os.mkfifo(fifo)
got = {}
def read_pipe():
    got["pipe"] = next(tidemark.decode_file(fifo, threads=1))
def decode_text():
    got["text"] = tidemark.decode(seq, name="s", threads=1)
reader, other = threading.Thread(target=read_pipe), threading.Thread(target=decode_text)
reader.start()
other.start()
with open(fifo, "w") as f:  # runs only if the reader waits for the pipe without the GIL
    f.write(">s\n" + seq + "\n")
reader.join()
other.join()
alone = tidemark.decode(seq, name="s", threads=1)
for d in got.values():
    assert np.array_equal(d.posteriors, alone.posteriors) and d.bed() == alone.bed()
print("ok")
"""


def test_decoding_releases_the_gil(tmp_path):
    """decode_file opens and reads a named pipe with the GIL released, so that the Python thread
    writing the pipe runs meanwhile (holding the GIL, the reader would wait for a writer that can
    never run: the script runs in a child process with a time-out), while a third thread decodes
    text; both threads' results equal a sequential decoding's (numpy array_equal, BED text)."""
    import subprocess
    import sys
    try:
        proc = subprocess.run([sys.executable, "-c", GIL_SCRIPT, str(tmp_path / "pipe")], capture_output=True,
                              text=True, timeout=90)
    except subprocess.TimeoutExpired:
        pytest.fail("decode_file on a named pipe did not finish in 90 s: is the GIL held while reading?")
    assert proc.returncode == 0 and proc.stdout == "ok\n", proc.stderr
