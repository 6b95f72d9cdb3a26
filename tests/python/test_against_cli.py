"""The Python module against the command line it shares its engine with: posteriors equal the
12-digit bedGraph of `tidemark scan`, calls format to its BED byte for byte, simulate/compare/fit
give its files, and errors carry its messages. Each check names its reference."""

import json
import os

import numpy as np
import pytest

import tidemark
import tmtest
from conftest import DATA, LAMBDA

CLI_BEDGRAPH = "tidemark scan --posteriors --posterior-digits 12 (command line)"
CLI_BED = "tidemark scan -o BED (command line)"


@pytest.fixture(scope="module")
def inputs(cli, tmp_path_factory):
    """Lambda phage (real sequence), two simulated contigs with CpG islands and N gaps, and the
    small multi-record fixture with IUPAC codes and lowercase."""
    folder = tmp_path_factory.mktemp("inputs")
    sim = folder / "sim.fa"
    cli.run("simulate", "-q", "-p", "cpg-island", "--contigs", "2", "--length", "150000", "--seed", "8",
            "--gaps", "0.01", "--gap-length", "150", "-o", sim)
    return {"lambda": LAMBDA, "sim": str(sim), "small": os.path.join(DATA, "small.fa")}


def quantised(values):
    """A posterior as the bedGraph stores it at 12 digits: llround(clamp(p, 0, 1) * 1e12)."""
    return np.floor(np.clip(values, 0.0, 1.0) * 1e12 + 0.5)


@pytest.mark.parametrize("profile", ["cpg-island", "cpg-island-2state"])
@pytest.mark.parametrize("name", ["lambda", "sim", "small"])
def test_posteriors_equal_cli_bedgraph(cli, inputs, tmp_path, profile, name):
    fasta = inputs[name]
    prefix = tmp_path / "scan"
    cli.run("scan", "-q", "-p", profile, fasta, "-o", tmp_path / "calls.bed", "--posteriors", prefix,
            "--posterior-digits", "12", "--summary", tmp_path / "summary.json")
    summary = {c["name"]: c for c in tmtest.read_json(tmp_path / "summary.json")["contigs"]}
    records = list(tidemark.decode_file(fasta, profile, threads=1))
    lengths = {d.name: d.length for d in records}
    assert list(lengths) == list(summary), "records in the order the command line decodes them"
    track = tmtest.read_bedgraph(f"{prefix}.cpg_island.bedgraph", lengths)
    for d in records:
        assert d.region_types == ["cpg_island"]
        p = d.posterior("cpg_island")
        assert p.dtype == np.float64 and p.shape == (d.length,)
        printed = track[d.name]
        gap = np.isnan(printed)  # runs of >= 100 unknown bases: no data in the track
        # CLI_BEDGRAPH: every other base's value, rounded as the track rounds it, is the printed one
        assert np.array_equal(quantised(p[~gap]), np.rint(printed[~gap] * 1e12)), CLI_BEDGRAPH
        # the command line's summary (JSON, 17 significant digits): log-likelihood bit for bit
        assert d.log_likelihood == summary[d.name]["log_likelihood"], "tidemark scan --summary"


@pytest.mark.parametrize("method", ["posterior", "viterbi"])
@pytest.mark.parametrize("options", [[], ["--min-posterior", "0.3", "--merge-gap", "20", "--min-length", "50"]])
def test_calls_equal_cli_bed(cli, inputs, tmp_path, method, options):
    for name in ("lambda", "sim", "small"):
        fasta = inputs[name]
        bed = tmp_path / f"{name}.bed"
        cli.run("scan", "-q", "-p", "cpg-island", "--decode", method, *options, fasta, "-o", bed)
        expected = "".join(line for line in open(bed, encoding="utf-8") if not line.startswith("#"))
        kw = dict(zip(("min_posterior", "merge_gap", "min_length"), (0.3, 20, 50))) if options else {}
        got = "".join(d.bed() for d in tidemark.decode_file(fasta, "cpg-island", method=method, **kw))
        assert got == expected, f"{CLI_BED}, {name}, {method}"
        if name == "sim":
            assert got, "test design: the simulated contigs have calls"


def test_browser_bed_and_region(cli, inputs, tmp_path):
    bed = tmp_path / "region.bed"
    cli.run("scan", "-q", "-p", "cpg-island", "--bed-style", "browser", "-r", "sim1:110001-150000",
            inputs["sim"], "-o", bed)
    expected = "".join(line for line in open(bed, encoding="utf-8")
                       if not line.startswith(("#", "track")))
    d = tidemark.decode_region(inputs["sim"], "sim1:110001-150000", "cpg-island")
    assert (d.name, d.offset, d.length) == ("sim1", 110000, 40000), "region as samtools faidx reads it"
    # the bases of the region: Python's own FASTA reading (tests/oracle/tmtest.py), sliced
    assert tidemark.read_region(inputs["sim"], "sim1:110001-150000") == \
        dict(tmtest.read_fasta(inputs["sim"]))["sim1"][110000:150000], "FASTA read in Python, sliced"
    assert d.bed("browser") == expected, CLI_BED + " --bed-style browser -r"
    rows = [r for r in tmtest.read_bed(bed) if not r[0].startswith("track ")]
    assert rows, "test design: the region has calls"
    calls = d.calls
    assert [(c.chrom, c.start, c.end, c.region) for c in calls] == \
        [(r[0], int(r[1]), int(r[2]), r[3]) for r in rows], CLI_BED
    assert [(c.core_start, c.core_end) for c in calls] == [(int(r[6]), int(r[7])) for r in rows], \
        CLI_BED + " thickStart/thickEnd"


def test_window_profile_calls_equal_cli(cli, inputs, tmp_path):
    """A window profile (isochore, 100-kb windows) decodes windows and hands bases to the sinks."""
    sim = tmp_path / "iso.fa"
    cli.run("simulate", "-q", "-p", "isochore", "--contigs", "1", "--length", "1500000", "--seed", "3", "-o", sim)
    bed, prefix = tmp_path / "iso.bed", tmp_path / "iso"
    cli.run("scan", "-q", "-p", "isochore", sim, "-o", bed, "--posteriors", prefix, "--posterior-digits", "12")
    d = next(tidemark.decode_file(sim, "isochore", threads=2))
    expected = "".join(line for line in open(bed, encoding="utf-8") if not line.startswith("#"))
    assert d.bed() == expected, CLI_BED + " (isochore)"
    for r in d.region_types:
        printed = tmtest.read_bedgraph(f"{prefix}.{r}.bedgraph", {d.name: d.length})[d.name]
        assert np.array_equal(quantised(d.posterior(r)), np.rint(printed * 1e12)), CLI_BEDGRAPH + f" ({r})"


def test_signature_calls_carry_evidence(cli, tmp_path):
    """A signature window profile (composition-shift, fitted as the README's recipe says): calls
    format to the BED, and each call's signature_distance equals the GFF3 attribute and delta*
    computed by numpy from the FASTA (Karlin & Burge 1995, Trends Genet. 11:283-290)."""
    sim, fitted = tmp_path / "cs.fa", tmp_path / "cs.json"
    cli.run("simulate", "-q", "-p", "composition-shift", "--contigs", "1", "--length", "1500000", "--seed", "4",
            "-o", sim)
    cli.run("fit", "-q", sim, "-p", "composition-shift", "-o", fitted)
    bed, gff3 = tmp_path / "cs.bed", tmp_path / "cs.gff3"
    cli.run("scan", "-q", sim, "-p", fitted, "-o", bed, "--gff3", gff3)
    d = next(tidemark.decode_file(sim, tidemark.load_profile(str(fitted))))
    expected = "".join(line for line in open(bed, encoding="utf-8") if not line.startswith("#"))
    assert d.calls and d.bed() == expected, CLI_BED + " (composition-shift)"
    attrs = [dict(kv.split("=", 1) for kv in line.rstrip("\n").split("\t")[8].split(";"))
             for line in open(gff3, encoding="utf-8") if not line.startswith("#")]
    assert [round(c.signature_distance, 4) for c in d.calls] == [float(a["signature_distance"]) for a in attrs], \
        "tidemark scan --gff3 signature_distance (command line)"
    seq = tmtest.read_fasta(str(sim))[0][1]
    record = tmtest.delta_star(seq)
    for c in d.calls:
        assert c.signature_distance == pytest.approx(
            np.abs(tmtest.delta_star(seq[c.start:c.end]) - record).mean(), rel=1e-9, abs=1e-12), \
            "numpy delta* (Karlin & Burge 1995)"
    first = next(tidemark.decode_file(LAMBDA, "cpg-island")).calls
    assert first and all(c.signature_distance is None for c in first), "no signature evidence without signatures"


def test_errors_carry_cli_messages(cli, inputs, tmp_path):
    cases = [
        (["scan", os.path.join(DATA, "bad_char.fa")],
         lambda: list(tidemark.decode_file(os.path.join(DATA, "bad_char.fa"))), tidemark.InputError),
        (["scan", "-p", "no-such-profile", inputs["small"]],
         lambda: list(tidemark.decode_file(inputs["small"], "no-such-profile")), tidemark.ProfileError),
        (["scan", "-r", "good2:1-17", inputs["small"]],
         lambda: tidemark.decode_region(inputs["small"], "good2:1-17"), tidemark.InputError),
        (["scan", "-r", "nope", inputs["small"]],
         lambda: tidemark.decode_region(inputs["small"], "nope"), tidemark.InputError),
        (["scan", os.path.join(DATA, "bad", "digit.fa")],
         lambda: list(tidemark.decode_file(os.path.join(DATA, "bad", "digit.fa"))), tidemark.InputError),
        (["profiles", "check", os.path.join(DATA, "bad", "profile_row_sum.json")],
         lambda: tidemark.load_profile(os.path.join(DATA, "bad", "profile_row_sum.json")), tidemark.ProfileError),
    ]
    for args, call, kind in cases:
        proc = cli.run(*args, "-o", os.devnull, check=False) if args[0] == "scan" else cli.run(*args, check=False)
        assert proc.returncode == 1, f"tidemark {' '.join(args)} fails with exit code 1 (README: Exit codes)"
        message = proc.stderr.strip().splitlines()[-1]
        with pytest.raises(kind) as info:
            call()
        assert isinstance(info.value, (tidemark.Error, ValueError))
        # the command line prints 'tidemark: error: ' + the library's message (src/cli/main.cpp)
        assert message == "tidemark: error: " + str(info.value), f"tidemark {' '.join(args)}"


def test_bad_base_in_text_names_position():
    with pytest.raises(tidemark.InputError) as info:
        tidemark.decode("ACGTX", name="mine")
    # the FASTA reader's wording (tidemark scan on tests/data/bad_char.fa), with a position in the text
    assert str(info.value) == ("sequence 'mine': illegal character 'X' (byte 0x58) at position 5 "
                               "(expected A, C, G, T, N or an IUPAC ambiguity code)")


def test_simulate_writes_cli_files(cli, tmp_path):
    cli.run("simulate", "-q", "-p", "cpg-island", "--lengths", "5000", "--lengths", "800", "--seed", "11",
            "--gaps", "0.05", "-o", tmp_path / "cli.fa", "--truth", tmp_path / "cli.bed")
    contigs = tidemark.simulate("cpg-island", [5000, 800], seed=11, gap_fraction=0.05,
                                fasta=tmp_path / "py.fa", truth=tmp_path / "py.bed")
    assert tmtest.read_bytes(tmp_path / "py.fa") == tmtest.read_bytes(tmp_path / "cli.fa"), \
        "tidemark simulate --seed 11 (FASTA, command line)"
    cli_truth = [line for line in open(tmp_path / "cli.bed", encoding="utf-8") if not line.startswith("#")]
    assert open(tmp_path / "py.bed", encoding="utf-8").readlines() == cli_truth, \
        "tidemark simulate --seed 11 --truth (command line; its # header line aside)"
    records = tmtest.read_fasta(str(tmp_path / "cli.fa"))
    assert [(c.name, c.sequence) for c in contigs] == records, "tidemark simulate FASTA (command line)"
    assert [[tuple(map(str, seg)) for seg in c.truth] for c in contigs] == \
        [[tuple(r[1:]) for r in tmtest.read_bed(tmp_path / "cli.bed") if r[0] == c.name] for c in contigs], \
        "tidemark simulate --truth (command line)"


def test_compare_equals_cli_json(cli, inputs, tmp_path):
    cli.run("simulate", "-q", "-p", "cpg-island", "--contigs", "1", "--length", "80000", "--seed", "2",
            "-o", tmp_path / "s.fa", "--truth", tmp_path / "truth.bed")
    cli.run("scan", "-q", tmp_path / "s.fa", "-o", tmp_path / "calls.bed")
    cli.run("compare", "-q", tmp_path / "calls.bed", tmp_path / "truth.bed", "--type", "cpg_island",
            "--json", tmp_path / "cmp.json", "-o", os.devnull)
    got = tidemark.compare(tmp_path / "calls.bed", tmp_path / "truth.bed", types=["cpg_island"])
    expected = tmtest.read_json(tmp_path / "cmp.json")
    got.pop("command_line", None)
    expected.pop("command_line", None)
    assert got == expected, "tidemark compare --json (command line)"
    # calls straight from a decoding score the same as their BED file
    calls = next(tidemark.decode_file(tmp_path / "s.fa")).calls
    again = tidemark.compare(calls, tmp_path / "truth.bed", types=["cpg_island"])
    assert again["types"] == expected["types"], "tidemark compare --json (command line)"


def test_fit_equals_cli(cli, tmp_path):
    cli.run("fit", "-q", LAMBDA, "-p", "cpg-island-2state", "--max-iter", "3", "-o", tmp_path / "cli.json")
    fitted = tidemark.fit(LAMBDA, "cpg-island-2state", max_iter=3)
    expected = tmtest.read_json(tmp_path / "cli.json")
    got = json.loads(fitted.to_json())
    for doc in (got, expected):
        doc["provenance"].pop("command_line")
        # wall and CPU seconds of this run (README: provenance.resources), not the fit's result
        assert set(doc["provenance"].pop("resources")) >= {"wall_seconds", "cpu_seconds"}
    assert got == expected, ("tidemark fit --max-iter 3 (command line), provenance's command line and "
                             "resources aside")
    assert fitted.provenance["iterations"] == 3
    # a Profile object as the start gives the same fit as its name
    again = json.loads(tidemark.fit(LAMBDA, tidemark.load_profile("cpg-island-2state"), max_iter=3).to_json())
    again["provenance"].pop("command_line")
    again["provenance"].pop("resources")
    assert again == expected, "tidemark fit --max-iter 3 (command line), from a Profile object"


def test_profiles_match_cli(cli):
    listed = [line.split()[0] for line in cli.run("profiles").stdout.splitlines() if line.strip()]
    for name in tidemark.builtin_profiles():
        assert name in listed, "tidemark profiles (command line)"
        p = tidemark.load_profile(name)
        shown = cli.run("profiles", "show", name).stdout
        assert json.loads(p.to_json()) == json.loads(shown), f"tidemark profiles show {name} (command line)"
        doc = json.loads(shown)
        assert [r["name"] for r in p.regions] == [r["name"] for r in doc["regions"]]
        assert [s["name"] for s in p.states] == [s["name"] for s in doc["states"]]
        for i, s in enumerate(doc["states"]):
            assert np.allclose(p.transitions[i], [doc["transitions"][s["name"]].get(t["name"], 0.0)
                                                  for t in doc["states"]], rtol=0, atol=0)

