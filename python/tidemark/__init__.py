"""tidemark in Python: the same engine as the `tidemark` command line (exact posterior decoding of
region-type HMM profiles), with results as numpy arrays.

    import tidemark
    d = tidemark.decode_region("chrX.fa.gz", "X:1-2,000,000", profile="cpg-island", threads=2)
    d.posteriors[:, 0]          # P(cpg_island) per base, numpy float64 (the CLI's bedGraph values)
    d.calls                     # [Call(chrom, start, end, region, ...), ...]  (the CLI's BED rows)
    for d in tidemark.decode_file("assembly.fa"):   # one record at a time
        ...

Errors raise tidemark.Error subclasses whose message is the command line's (without the
'tidemark: error: ' prefix): InputError and ProfileError and UsageError are ValueErrors,
IoError is an OSError.
"""

import collections
import json
import os
import tempfile

from . import _tidemark
from ._tidemark import Profile, builtin_profiles

__version__ = _tidemark.__version__
__all__ = ["Profile", "builtin_profiles", "load_profile", "decode", "decode_file", "decode_region",
           "read_region", "Decoding", "Call", "fit", "simulate", "SimulatedContig", "compare", "Error",
           "InputError", "ProfileError", "UsageError", "IoError", "InternalError"]


class Error(Exception):
    """Any failure tidemark reports; str(e) is the message the command line prints."""


class InputError(Error, ValueError):
    """Malformed or unusable input: FASTA, BED, region strings, missing files (exit code 1)."""


class ProfileError(Error, ValueError):
    """A profile that does not parse or validate, or an unknown profile name (exit code 1)."""


class UsageError(Error, ValueError):
    """Options that conflict or are out of range (the command line's exit code 2)."""


class IoError(Error, OSError):
    """An output that could not be written (exit code 3)."""


class InternalError(Error, RuntimeError):
    """A broken invariant inside tidemark (a bug; please report it)."""


_tidemark._errors.update({c.__name__: c for c in (Error, InputError, ProfileError, UsageError,
                                                    IoError, InternalError)})


def load_profile(name_or_path):
    """A built-in profile by name (see builtin_profiles()) or a tidemark-profile/1 JSON file,
    validated as `tidemark profiles check` validates it."""
    return Profile.load(name_or_path)


def _profile_provenance(self):
    """The provenance object of a fitted profile (dict), or None."""
    return json.loads(self._provenance) if self._provenance else None


Profile.provenance = property(_profile_provenance)

Call = collections.namedtuple(
    "Call",
    "chrom start end region mean_posterior min_posterior core_start core_end gc_fraction cpg_obs_exp "
    "signature_distance")
Call.__doc__ = """One called interval, 0-based half-open on the named sequence (BED coordinates);
core_start/core_end span its bases with P >= high_posterior; cpg_obs_exp is None when undefined;
signature_distance is the dinucleotide relative-abundance distance delta* (Karlin & Burge 1995,
"Dinucleotide relative abundance extremes: a genomic signature", Trends Genet. 11:283-290) between
the call's bases and its whole record, both strands, as the GFF3 attribute of that name: for
profiles whose windows score composition signatures, else None."""


class Decoding:
    """One decoded sequence (a record, a region of one, or an in-memory sequence).

    posteriors   numpy array, one row per base and one column per region type in region_types:
                 P(region | whole sequence) (posterior method), or 0/1 along the Viterbi path;
                 None when decoded with dtype=None
    log_likelihood  ln P(sequence | profile) (posterior) or ln P(sequence, best path) (viterbi)
    path         viterbi only: per base, the path's region as an index into path_regions (int16)
    calls        list of Call, as `tidemark scan` calls them with the same options
    name, offset (0-based start on the named sequence), length, full_length, unknown, soft_masked
    """

    def __init__(self, decoded):
        self._d = decoded

    name = property(lambda self: self._d.name)
    offset = property(lambda self: self._d.offset)
    length = property(lambda self: self._d.length)
    full_length = property(lambda self: self._d.full_length)
    unknown = property(lambda self: self._d.unknown)
    soft_masked = property(lambda self: self._d.soft_masked)
    log_likelihood = property(lambda self: self._d.log_likelihood)
    method = property(lambda self: self._d.method)
    region_types = property(lambda self: list(self._d.region_types))
    posteriors = property(lambda self: self._d.posteriors)
    path = property(lambda self: self._d.path)
    path_regions = property(lambda self: list(self._d.path_regions))

    def posterior(self, region_type=None):
        """The posterior column of one region type (default: the only or first one)."""
        types = self.region_types
        i = 0 if region_type is None else types.index(region_type)
        return self.posteriors[:, i]

    @property
    def calls(self):
        return [Call(*t) for t in self._d._call_tuples()]

    def calls_frame(self):
        """The calls as a pandas DataFrame (needs python3-pandas)."""
        import pandas
        return pandas.DataFrame(self.calls, columns=Call._fields)

    def bed(self, style="plain"):
        """The calls as the BED lines `tidemark scan` writes (without its # header lines);
        style 'plain' (BED6+4) or 'browser' (BED9+4)."""
        return self._d.bed(style)

    def __repr__(self):
        return (f"<tidemark.Decoding {self.name}:{self.offset + 1}-{self.offset + self.length} "
                f"{self.method}, log-likelihood {self.log_likelihood:.6f}, {len(self._d._call_tuples())} calls>")


def _engine(profile, method, region_types, dtype, threads, soft_masked, min_posterior, merge_gap,
            min_length, high_posterior, criteria, block_size):
    if isinstance(region_types, str):
        region_types = [region_types]
    posteriors = dtype is not None
    return _tidemark._engine(profile, method, list(region_types or []), str(dtype or "float64"), posteriors,
                             threads, soft_masked, min_posterior, merge_gap, min_length, high_posterior,
                             criteria, block_size)


_DECODE_OPTIONS = """
    profile         built-in name, profile file or Profile [cpg-island]
    method          'posterior' (exact posteriors) or 'viterbi' (best path), as scan --decode
    region_types    columns of posteriors: region type names [the profile's reported ones]
    dtype           'float64', 'float32', or None: no posterior array (calls, log-likelihood and
                    Viterbi path only; what a whole genome's calls need)
    threads         decoding threads for long sequences (0 = every core); results never depend on it
    soft_masked     lowercase bases: 'base' or 'unknown', as scan --soft-masked
    min_posterior, merge_gap, min_length   calling options [the profile's defaults]
    high_posterior  core threshold [0.95]; criteria 'none', 'ggf1987' or 'tj2002'
    block_size      decoder block (0 = automatic), as scan --block
"""


def decode(sequence, profile="cpg-island", *, name="sequence", method="posterior", region_types=None,
           dtype="float64", threads=0, soft_masked="base", min_posterior=None, merge_gap=None,
           min_length=None, high_posterior=0.95, criteria="none", block_size=0):
    """Decodes one in-memory sequence (str or bytes: A, C, G, T, N and IUPAC codes, any case;
    spaces and line ends are skipped) and returns a Decoding. The GIL is released meanwhile."""
    engine = _engine(profile, method, region_types, dtype, threads, soft_masked, min_posterior,
                     merge_gap, min_length, high_posterior, criteria, block_size)
    return Decoding(_tidemark._decode_text(engine, sequence, name))


def decode_file(path, profile="cpg-island", *, regions=None, method="posterior", region_types=None,
                dtype="float64", threads=0, soft_masked="base", min_posterior=None, merge_gap=None,
                min_length=None, high_posterior=0.95, criteria="none", block_size=0):
    """Iterates over the records of a FASTA file (plain, gzip, bgzip, xz, bzip2, zstd) or over
    regions of an indexed one (regions: 'NAME' or 'NAME:BEG-END', 1-based inclusive, as scan -r),
    yielding one Decoding at a time, so that memory is that of one record."""
    engine = _engine(profile, method, region_types, dtype, threads, soft_masked, min_posterior,
                     merge_gap, min_length, high_posterior, criteria, block_size)
    if isinstance(regions, str):
        regions = [regions]
    for decoded in _tidemark._records(engine, os.fspath(path), list(regions or [])):
        yield Decoding(decoded)


def read_region(path, region):
    """The bases of one region ('NAME' or 'NAME:BEG-END', 1-based inclusive) of an indexed FASTA
    file as a str of A, C, G, T and N (unknown bases), read as decode_region reads them."""
    return _tidemark._region_text(os.fspath(path), region)


def decode_region(path, region, profile="cpg-island", **options):
    """Decodes one region ('NAME' or 'NAME:BEG-END', 1-based inclusive) of an indexed FASTA file
    (the .fai index is built when missing). Options as decode_file."""
    return next(decode_file(path, profile, regions=[region], **options))


decode.__doc__ += _DECODE_OPTIONS
decode_file.__doc__ += _DECODE_OPTIONS


def fit(inputs, profile=None, *, classes=None, order=1, select=None, init_from_data=False,
        init_window=2000, labels=None, default_region=None, name=None, pseudocount=1.0, max_iter=100,
        tol=1e-6, seed=1, restarts=1, perturbation=0.5, freeze=(), order_by_gc=False, threads=0,
        regions=(), soft_masked="base", block_size=0, verbose=False):
    """Fits a profile to FASTA files as `tidemark fit` does (the same options, by the long option
    names) and returns it: Baum-Welch from a profile (built-in name, file or Profile; templates
    such as gc-shift are seeded from the data first), templates of `classes` ('K' or 'A..B', with
    select='bic'), or labelled counting (labels = BED). verbose=True logs the iterations."""
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    if isinstance(regions, str):
        regions = [regions]
    if isinstance(freeze, str):
        freeze = [freeze]
    return _tidemark._fit([os.fspath(i) for i in inputs], profile, classes, order, select, init_from_data,
                          init_window, labels, default_region, name, pseudocount, max_iter, tol, seed,
                          restarts, perturbation, list(freeze), order_by_gc, threads, list(regions),
                          soft_masked, block_size, verbose)


SimulatedContig = collections.namedtuple("SimulatedContig", "name sequence truth")
SimulatedContig.__doc__ = """A simulated contig: its bases (str, N inside gaps) and its true
segments as (start, end, region) tuples that tile it."""


def simulate(profile="cpg-island", lengths=(100000,), *, seed=1, gap_fraction=0.0, gap_mean_length=100.0,
             name_prefix="sim", fasta=None, truth=None):
    """Draws contigs of the given lengths from the profile's HMM as `tidemark simulate` does (one
    seed gives the same bases on every machine). Returns a list of SimulatedContig; fasta and
    truth, when given, are also written there as the command line writes them (the truth BED
    without its '#' header line)."""
    if isinstance(lengths, int):
        lengths = [lengths]
    fasta_text, truth_text = _tidemark._simulate(profile, list(lengths), seed, gap_fraction, gap_mean_length,
                                                 name_prefix, 0)
    if fasta is not None or truth is not None:
        wrapped, _ = _tidemark._simulate(profile, list(lengths), seed, gap_fraction, gap_mean_length,
                                         name_prefix, 60)
        for path, text in ((fasta, wrapped), (truth, truth_text)):
            if path is not None:
                with open(path, "wb") as f:
                    f.write(text)
    segments = collections.defaultdict(list)
    for line in truth_text.decode().splitlines():
        chrom, start, end, region = line.split("\t")
        segments[chrom].append((int(start), int(end), region))
    lines = fasta_text.decode().split("\n")
    return [SimulatedContig(lines[i][1:], lines[i + 1], segments[lines[i][1:]])
            for i in range(0, len(lines) - 1, 2)]


def compare(calls, truth, *, genome=None, name=None, types=()):
    """Scores calls against a truth set as `tidemark compare` does (BED files; genome = chrom
    sizes, .fai or FASTA for true negatives) and returns its JSON report as a dict."""
    def as_file(x, stack):
        if isinstance(x, (str, os.PathLike)):
            return os.fspath(x)
        f = tempfile.NamedTemporaryFile("w", suffix=".bed", delete=False)
        stack.append(f.name)
        with f:
            for c in x:  # Call records or (chrom, start, end, type) tuples
                f.write("\t".join(str(v) for v in tuple(c)[:4]) + "\n")
        return f.name
    temporary = []
    try:
        text = _tidemark._compare(as_file(calls, temporary), as_file(truth, temporary),
                                  None if genome is None else os.fspath(genome), name, list(types))
    finally:
        for path in temporary:
            os.unlink(path)
    return json.loads(text)
