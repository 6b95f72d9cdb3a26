"""The Python module on arrays large enough for its page-committing thread (module.cpp,
PageCommitter, from 64 MiB on) against the command line's 12-digit bedGraph and Viterbi BED. A
file of its own so that ctest runs it beside test_against_cli.py (it decodes a 9-Mbp record five
times)."""

import numpy as np
import pytest

import tidemark
import tmtest
from test_against_cli import CLI_BEDGRAPH, quantised


@pytest.fixture(scope="module")
def long_fasta(tmp_path_factory):
    """One 9-Mbp record: simulated sequence at its start, middle and end, N between."""
    pieces = tidemark.simulate("cpg-island", [150_000] * 3, seed=12)
    gap = (9_000_000 - 3 * 150_000) // 2
    sequence = pieces[0].sequence + "N" * gap + pieces[1].sequence + "N" * gap + pieces[2].sequence
    fasta = tmp_path_factory.mktemp("long") / "long.fa"
    fasta.write_text(">long\n" + sequence + "\n")
    return fasta, len(sequence)


def test_array_past_64_mib_equals_cli_bedgraph(cli, long_fasta, tmp_path):
    """A record whose float64 array is 72 MiB, past the size from which the module commits the
    array's pages on a second thread while decoding (module.cpp, PageCommitter): simulated
    sequence at its start, middle and end, N between. The sequence's posteriors equal the 12-digit
    bedGraph, on one thread and on two (segments writing into the array side by side)."""
    fasta, length = long_fasta
    prefix = tmp_path / "scan"
    cli.run("scan", "-q", "-t", "1", fasta, "-o", tmp_path / "calls.bed", "--posteriors", prefix,
            "--posterior-digits", "12")
    printed = tmtest.read_bedgraph(f"{prefix}.cpg_island.bedgraph", {"long": length})["long"]
    known = ~np.isnan(printed)
    assert known.sum() == 3 * 150_000, "test design: the track covers the simulated pieces only"
    for threads in (1, 2):
        d = next(tidemark.decode_file(fasta, threads=threads))
        p = d.posterior("cpg_island")
        assert p.nbytes > 64 << 20, "test design: past the 64 MiB from which pages are committed"
        assert np.array_equal(quantised(p[known]), np.rint(printed[known] * 1e12)), CLI_BEDGRAPH
        assert np.all((p >= 0) & (p <= 1)), "probabilities (every cell written)"


def test_viterbi_arrays_past_64_mib_equal_cli_bed(cli, long_fasta, tmp_path):
    """Viterbi on the same record: a 72-MiB 0/1 array and an 18-MB path, committed together; the
    calls format to the command line's BED (scan --decode viterbi) and the path is the column of
    ones (numpy)."""
    fasta, length = long_fasta
    bed = tmp_path / "viterbi.bed"
    cli.run("scan", "-q", "-t", "1", "--decode", "viterbi", fasta, "-o", bed)
    expected = "".join(line for line in open(bed, encoding="utf-8") if not line.startswith("#"))
    d = next(tidemark.decode_file(fasta, method="viterbi", threads=1))
    assert d.posteriors.nbytes + d.path.nbytes > 64 << 20, "test design: past 64 MiB"
    assert d.bed() == expected and expected, "tidemark scan --decode viterbi (command line)"
    island = d.path_regions.index("cpg_island")
    assert np.array_equal(d.posterior("cpg_island") == 1.0, d.path == island)
