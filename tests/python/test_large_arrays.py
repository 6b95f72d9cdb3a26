"""The Python module on arrays large enough for its page-committing thread (module.cpp,
PageCommitter, from 64 MiB on) against the command line's 12-digit bedGraph. A file of its own
so that ctest runs it beside test_against_cli.py (it decodes 9 Mbp three times)."""

import numpy as np

import tidemark
import tmtest
from test_against_cli import CLI_BEDGRAPH, quantised


def test_array_past_64_mib_equals_cli_bedgraph(cli, tmp_path):
    """A record whose float64 array is 72 MiB, past the size from which the module commits the
    array's pages on a second thread while decoding (module.cpp, PageCommitter): simulated
    sequence at its start, middle and end, N between. The sequence's posteriors equal the 12-digit
    bedGraph, on one thread and on two (segments writing into the array side by side)."""
    pieces = tidemark.simulate("cpg-island", [150_000] * 3, seed=12)
    gap = (9_000_000 - 3 * 150_000) // 2
    sequence = pieces[0].sequence + "N" * gap + pieces[1].sequence + "N" * gap + pieces[2].sequence
    fasta = tmp_path / "long.fa"
    fasta.write_text(">long\n" + sequence + "\n")
    prefix = tmp_path / "scan"
    cli.run("scan", "-q", "-t", "1", fasta, "-o", tmp_path / "calls.bed", "--posteriors", prefix,
            "--posterior-digits", "12")
    printed = tmtest.read_bedgraph(f"{prefix}.cpg_island.bedgraph", {"long": len(sequence)})["long"]
    known = ~np.isnan(printed)
    assert known.sum() == 3 * 150_000, "test design: the track covers the simulated pieces only"
    for threads in (1, 2):
        d = next(tidemark.decode_file(fasta, threads=threads))
        p = d.posterior("cpg_island")
        assert p.nbytes > 64 << 20, "test design: past the 64 MiB from which pages are committed"
        assert np.array_equal(quantised(p[known]), np.rint(printed[known] * 1e12)), CLI_BEDGRAPH
        assert np.all((p >= 0) & (p <= 1)), "probabilities (every cell written)"
