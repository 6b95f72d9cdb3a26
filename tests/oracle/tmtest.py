"""Shared helpers for tidemark's oracle tests: run the binary, read its outputs, read and write FASTA, tally checks."""

import gzip
import importlib.util
import json
import os
import subprocess
import sys
import tempfile
import traceback

import numpy as np


class Checks:
    """A pass/fail tally; every check names the outside source it compares against."""

    def __init__(self, title):
        self.title = title
        self.passed = 0
        self.failed = 0

    def check(self, ok, what, source, detail=""):
        ok = bool(ok)
        if ok:
            self.passed += 1
        else:
            self.failed += 1
        status = "ok  " if ok else "FAIL"
        print(f"{status} {what} [{source}]" + (f": {detail}" if detail else ""), flush=True)
        return ok

    def equal(self, got, expected, what, source):
        return self.check(got == expected, what, source, f"got {got!r}, expected {expected!r}")

    def at_most(self, value, bound, what, source):
        return self.check(value <= bound, what, source, f"{value:.3g} (limit {bound:.3g})")

    def finish(self):
        """Prints the final tally line and exits non-zero when anything failed."""
        if self.passed + self.failed == 0:
            self.failed += 1
            print("FAIL no check ran", flush=True)
        print(f"{self.passed} passed, {self.failed} failed", flush=True)
        sys.exit(1 if self.failed else 0)


def main(title, body):
    """Runs body(checks, binary, workdir) in a temporary directory that is always removed; an
    unexpected exception counts as one failure so that the final tally line is still printed."""
    checks = Checks(title)
    if len(sys.argv) != 2:
        print(f"usage: {sys.argv[0]} PATH_TO_TIDEMARK_BINARY", file=sys.stderr)
        sys.exit(2)
    binary = os.path.abspath(sys.argv[1])
    print(f"# {title}; binary {binary}", flush=True)
    try:
        with tempfile.TemporaryDirectory(prefix="tidemark-oracle-") as workdir:
            body(checks, binary, workdir)
    except Exception:  # report and count it; the tally must still be printed
        traceback.print_exc()
        checks.check(False, "test body ran to completion", "test harness")
    checks.finish()


class RunError(RuntimeError):
    pass


def run(binary, args, cwd=None):
    """Runs tidemark with args; returns stdout. Raises RunError with stderr on a non-zero exit."""
    proc = subprocess.run([binary] + list(args), cwd=cwd, capture_output=True, text=True)
    if proc.returncode != 0:
        raise RunError(f"tidemark {' '.join(args)} exited with {proc.returncode}:\n{proc.stderr}")
    return proc.stdout


def run_in(binary, folder, args):
    """Runs tidemark in folder (created when missing); returns stdout."""
    os.makedirs(folder, exist_ok=True)
    return run(binary, args, cwd=folder)


def read_bytes(path):
    with open(path, "rb") as f:
        return f.read()


def check_same_calls(checks, one_path, many_path, what):
    """Two runs' BED files hold the same calls byte for byte, apart from the header's second line
    (the command line, which names the output)."""
    one, many = (read_bytes(path).split(b"\n", 2)[2] for path in (one_path, many_path))
    checks.check(one == many, what, "the same run, byte for byte", f"{len(one)} and {len(many)} bytes")


def nearest_end_distances(calls, truth):
    """Distance from each end of each true interval to the nearest end (start or end) of any call;
    both lists of (begin, end) pairs."""
    ends = np.array(sorted({b for b, _ in calls} | {e for _, e in calls}))
    return np.array([np.abs(ends - x).min() for b, e in truth for x in (b, e)])


def check_refined_ends(checks, grid, refined, truth, limit, source):
    """Boundary errors of calls on the window grid and refined (lists of (begin, end)) against the
    true intervals: prints both, checks the refined median against limit; returns both arrays."""
    before, after = nearest_end_distances(grid, truth), nearest_end_distances(refined, truth)
    print(f"# {len(truth)} inserts, {len(grid)} calls on the grid, {len(refined)} refined; boundary error "
          f"median {np.median(before):.0f} bp on the grid, {np.median(after):.0f} bp refined", flush=True)
    print("# errors on the grid: " + " ".join(str(int(x)) for x in before), flush=True)
    print("# errors refined:     " + " ".join(str(int(x)) for x in after), flush=True)
    checks.at_most(np.median(after), limit, "median distance from an insert end to the nearest call end", source)
    return before, after


def longest_first(lengths, n):
    """The documented shard rule re-implemented (Graham 1969 LPT): items by decreasing length,
    ties by input order, each to the least-loaded shard, ties by the lower shard."""
    order = sorted(range(len(lengths)), key=lambda i: (-lengths[i], i))
    load, shard = [0] * n, [0] * len(lengths)
    for i in order:
        s = min(range(n), key=lambda k: (load[k], k))
        shard[i] = s
        load[s] += lengths[i]
    return shard


def profile_difference(a, b, path=""):
    """Largest relative difference over the numbers of two profile JSON documents (provenance,
    sources and name left out); raises on a structural difference."""
    if isinstance(a, dict):
        assert set(a) == set(b), f"{path}: keys differ"
        return max([profile_difference(a[k], b[k], f"{path}/{k}") for k in a
                    if k not in ("provenance", "sources", "name")], default=0.0)
    if isinstance(a, list):
        assert len(a) == len(b), f"{path}: lengths differ"
        return max([profile_difference(x, y, f"{path}[{i}]") for i, (x, y) in enumerate(zip(a, b))], default=0.0)
    if isinstance(a, (int, float)) and not isinstance(a, bool):
        return abs(a - b) / max(1.0, abs(a), abs(b))
    assert a == b, f"{path}: {a!r} != {b!r}"
    return 0.0


def island_panel():
    """scripts/island-panel.py loaded as a module (its truth builders, cache and scoring)."""
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "scripts", "island-panel.py")
    spec = importlib.util.spec_from_file_location("island_panel", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def foreign_by_rule(summary, profile_path):
    """Names of the contigs the README's screening rule lists, applied to the summary's own
    per-contig entries: enough known bases and P(atypical) (the reported regions' expected
    fractions) at least 0.5, or a composition distance beyond its limit (contig screen)."""
    reported = [r["name"] for r in read_json(profile_path)["regions"] if r.get("report")]
    return [c["name"] for c in summary["contigs"]
            if c["length"] - c["unknown_bases"] >= summary["foreign_contigs"]["min_known_bases"]
            and (sum(c["regions"][r]["expected_fraction"] for r in reported) >= 0.5
                 or c.get("composition_distance", 0) > c.get("composition_limit", float("inf")))]


def read_json(path):
    with open(path, encoding="utf-8") as f:
        return json.load(f)


def read_fasta(path):
    """Records of a plain or gzip FASTA file as a list of (name, sequence); the name is the first
    word of the header and the sequence is upper-cased with whitespace removed."""
    opener = gzip.open if path.endswith(".gz") else open
    records = []
    name, parts = None, []
    with opener(path, "rt") as f:
        for line in f:
            line = line.rstrip("\r\n")
            if line.startswith(">"):
                if name is not None:
                    records.append((name, "".join(parts).upper()))
                header = line[1:].split()
                name, parts = (header[0] if header else ""), []
            elif name is not None:
                parts.append("".join(line.split()))
    if name is not None:
        records.append((name, "".join(parts).upper()))
    return records


def write_fasta(path, records, width=60):
    with open(path, "w", encoding="ascii") as f:
        for name, seq in records:
            f.write(f">{name}\n")
            for i in range(0, len(seq), width):
                f.write(seq[i:i + width] + "\n")


def read_bedgraph(path, lengths):
    """Expands a bedGraph into one per-base float array per contig (lengths: name -> length).
    Bases that no interval covers stay NaN so that callers can check the tiling. Raises
    ValueError for an unknown contig, an interval outside the contig or overlapping intervals."""
    values = {name: np.full(n, np.nan) for name, n in lengths.items()}
    with open(path, encoding="utf-8") as f:
        for lineno, line in enumerate(f, 1):
            if not line.strip() or line.startswith(("#", "track", "browser")):
                continue
            chrom, start, end, value = line.rstrip("\n").split("\t")
            start, end = int(start), int(end)
            if chrom not in values:
                raise ValueError(f"{path}:{lineno}: unknown contig {chrom!r}")
            if not 0 <= start < end <= lengths[chrom]:
                raise ValueError(f"{path}:{lineno}: interval {start}-{end} outside {chrom}")
            if not np.isnan(values[chrom][start:end]).all():
                raise ValueError(f"{path}:{lineno}: interval {start}-{end} overlaps another")
            values[chrom][start:end] = float(value)
    return values


def read_bedgraph_intervals(path):
    """A bedGraph without header lines as {name: [(start, end, value), ...]} in file order."""
    out = {}
    with open(path, encoding="utf-8") as f:
        for line in f:
            c, s, e, v = line.rstrip("\n").split("\t")
            out.setdefault(c, []).append((int(s), int(e), float(v)))
    return out


def long_unknown_runs(seq, at_least=100):
    """Boolean mask of the bases in runs of at least `at_least` unknown bases (not A, C, G, T in
    either case): what posterior tracks leave out (track_gap_min_length, README)."""
    known = np.isin(np.frombuffer(seq.upper().encode(), dtype=np.uint8), np.frombuffer(b"ACGT", dtype=np.uint8))
    mask = np.zeros(len(seq), dtype=bool)
    edges = np.flatnonzero(np.diff(np.concatenate(([1], known.astype(np.int8), [1]))))
    for begin, end in zip(edges[::2], edges[1::2]):  # runs of unknown bases: [begin, end)
        if end - begin >= at_least:
            mask[begin:end] = True
    return mask


def read_bed(path):
    """Data lines of a BED file as lists of column strings (header lines starting with # skipped)."""
    rows = []
    with open(path, encoding="utf-8") as f:
        for line in f:
            if line.startswith("#") or not line.strip():
                continue
            rows.append(line.rstrip("\n").split("\t"))
    return rows


def delta_star(seq):
    """rho*_XY of a sequence and its reverse complement together, in numpy (Karlin & Burge 1995,
    Trends Genet. 11:283-290): an independent route to the signature_distance attribute
    (the mean of |rho*_XY(call) - rho*_XY(record)| over the 16 XY)."""
    code = np.frombuffer(seq.encode(), np.uint8)
    lut = np.full(256, 4, np.int64)
    for i, b in enumerate(b"ACGT"):
        lut[b] = i
    x = lut[code]
    both = np.concatenate([x, [4], (3 - x[::-1]) % 8])  # the reverse complement, after a break
    known = both[both < 4]
    f = np.bincount(known, minlength=4) / len(known)
    a, b = both[:-1], both[1:]
    ok = (a < 4) & (b < 4)
    pairs = np.bincount(a[ok] * 4 + b[ok], minlength=16).reshape(4, 4) / ok.sum()
    return pairs / np.outer(f, f)
