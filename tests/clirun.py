"""Running the `ampfront` command as a user does: a fresh interpreter, its exit status and its stderr."""

import hashlib
import subprocess
import sys
from pathlib import Path

TINY_STUDY = """
title = "Tiny study"
topologies = ["simple_ota"]
objectives = ["power", "gbw"]
technology = "generic180"

[spec]
supply = "1.8 V"
load_capacitance = "2 pF"
min_gain = "30 dB"

[search]
population = 8
generations = 2
"""


def ampfront(*args, cwd=None, timeout=300) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "ampfront.optimize", *map(str, args)], capture_output=True,
                          text=True, timeout=timeout, cwd=cwd)


def one_line(proc: subprocess.CompletedProcess) -> str:
    """The single line a refused command prints: exactly one, no traceback."""
    lines = proc.stderr.strip().splitlines()
    assert "Traceback" not in proc.stderr + proc.stdout, proc.stderr
    assert len(lines) == 1, proc.stderr
    return lines[0]


def tree_digest(folder: Path) -> str:
    """Every path, mode and byte below `folder`: equal digests mean nothing was changed."""
    digest = hashlib.sha256()
    for path in sorted(folder.rglob("*")):
        digest.update(str(path.relative_to(folder)).encode())
        digest.update(oct(path.stat().st_mode).encode())
        if path.is_file():
            digest.update(path.read_bytes())
    return digest.hexdigest()
