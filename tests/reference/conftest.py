import json
import os
import pathlib
import subprocess

import numpy as np
import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]
BIN = os.environ.get("LATCHTIME_BIN", str(ROOT / "target" / "debug" / "latchtime"))


def latchtime(*args, check=True):
    """Runs the latchtime binary; returns (exit code, parsed JSON stdout or None, stderr)."""
    p = subprocess.run([BIN, *map(str, args)], capture_output=True, text=True)
    if check and p.returncode != 0:
        raise AssertionError(f"latchtime {' '.join(map(str, args))} failed ({p.returncode}): {p.stderr}")
    out = json.loads(p.stdout) if p.stdout.strip() else None
    return p.returncode, out, p.stderr


def write_raw(path, values):
    np.asarray(values, dtype="<f8").tofile(path)


def read_raw(path):
    return np.fromfile(path, dtype="<f8")


@pytest.fixture
def lt():
    return latchtime
