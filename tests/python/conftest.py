"""pytest set-up of the Python module's tests: the command line to compare with comes from
TIDEMARK_BINARY (ctest sets it, and PYTHONPATH to the built package); the oracle tests' helpers
(tests/oracle/tmtest.py, test_pomegranate.py) are shared."""

import os
import subprocess
import sys

import pytest

sys.dont_write_bytecode = True  # keep __pycache__ out of the source tree
HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.join(HERE, "..", "oracle"))
DATA = os.path.join(HERE, "..", "data")
LAMBDA = "/usr/share/doc/bowtie2/examples/reference/lambda_virus.fa.gz"


@pytest.fixture(scope="session")
def binary():
    path = os.environ.get("TIDEMARK_BINARY")
    if not path:
        pytest.fail("TIDEMARK_BINARY is not set (run through ctest, label python)")
    return path


class Cli:
    def __init__(self, binary):
        self.binary = binary

    def run(self, *args, check=True):
        proc = subprocess.run([self.binary, *map(str, args)], capture_output=True, text=True)
        if check and proc.returncode != 0:
            raise AssertionError(f"tidemark {' '.join(map(str, args))} exited {proc.returncode}:\n{proc.stderr}")
        return proc


@pytest.fixture(scope="session")
def cli(binary):
    return Cli(binary)
