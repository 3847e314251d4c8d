"""`--out` never destroys what ampfront did not write; bad destinations are refused before any search.

Reference: the file system itself (a SHA-256 over every path, mode and byte of the user's folder before and
after each command); the rule is the project's own (README, "Outputs").
"""

import json
import os
from pathlib import Path

import pytest

from .clirun import TINY_STUDY, ampfront, one_line, tree_digest


def _study(folder):
    path = folder / "study.toml"
    path.write_text(TINY_STUDY)
    return path


def _users_folder(tmp_path):
    home = tmp_path / "work"
    home.mkdir()
    (home / "notes.txt").write_text("my own notes\n")
    (home / "sub").mkdir()
    (home / "sub" / "data.csv").write_text("a,b\n1,2\n")
    return home


def test_out_dot_leaves_the_current_folder_alone(tmp_path):
    home = _users_folder(tmp_path)
    study = _study(home)
    before = tree_digest(home)
    proc = ampfront("run", study, "--out", ".", cwd=home)
    assert proc.returncode == 2 and "--out" in one_line(proc)
    assert tree_digest(home) == before


def test_out_folder_holding_the_users_files_or_the_study(tmp_path):
    home = _users_folder(tmp_path)
    study = _study(home)
    before = tree_digest(home)
    for out in (home, home / "sub"):
        for extra in ((), ("--overwrite",)):
            proc = ampfront("run", study, "--out", out, *extra)
            assert proc.returncode == 2 and "--out" in one_line(proc), proc.stderr
    assert tree_digest(home) == before


def test_out_that_is_a_file(tmp_path):
    home = _users_folder(tmp_path)
    study = _study(tmp_path)
    before = tree_digest(home)
    proc = ampfront("run", study, "--out", home / "notes.txt", "--overwrite")
    assert proc.returncode == 2 and "file" in one_line(proc)
    assert tree_digest(home) == before


def test_impossible_out_fails_before_the_search(tmp_path, monkeypatch):
    from ampfront.optimize import run
    from ampfront.topologies.errors import InputError

    searched = []
    monkeypatch.setattr(run, "_search", lambda *args: searched.append(args))
    with pytest.raises(InputError, match="create and write"):
        run.run_study(_study(tmp_path), Path("/proc/ampfront-cannot-be-here"))
    assert not searched
    proc = ampfront("run", _study(tmp_path), "--out", "/proc/ampfront-cannot-be-here")
    assert proc.returncode == 2 and "create and write" in one_line(proc)


def test_a_refused_run_creates_no_folders(tmp_path, monkeypatch):
    """Refused after the destination was judged (here: the technology, refused as it loads), a run leaves
    none of the missing parent folders of --out behind."""
    from ampfront.optimize import run
    from ampfront.topologies.errors import InputError

    def refuse(*args):
        raise InputError("process.toml", "name", "a plain name")

    monkeypatch.setattr(run, "load", refuse)
    study = _study(tmp_path)
    with pytest.raises(InputError):
        run.run_study(study, tmp_path / "a" / "b" / "result")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["study.toml"]


def test_earlier_result_is_replaced_only_when_asked(tmp_path):
    study = _study(tmp_path)
    out = tmp_path / "result"
    assert ampfront("run", study, "--out", out).returncode == 0
    first = json.loads((out / "manifest.json").read_text())["created_utc"]
    proc = ampfront("run", study, "--out", out)
    assert proc.returncode == 2 and "--overwrite" in one_line(proc)
    proc = ampfront("run", study, "--out", out, "--overwrite", "--seed", "5")
    assert proc.returncode == 0, proc.stderr
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["seed"] == 5 and manifest["complete"] and manifest["created_utc"] >= first
    # Nothing of the earlier result is left beside the new one.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["result", "study.toml"]


@pytest.mark.parametrize("place", ["my_annotations.txt", "netlists/my_annotations.txt", "netlists/mine/deck.sp",
                                   "netlists/my_variant.sp"])
def test_a_users_file_inside_an_earlier_result_is_never_replaced(place, tmp_path):
    """Also inside the result's own sub-folders: the manifest lists every file ampfront wrote there, so even
    a deck of the user's named like ours is found."""
    study = _study(tmp_path)
    out = tmp_path / "result"
    assert ampfront("run", study, "--out", out).returncode == 0
    (out / place).parent.mkdir(parents=True, exist_ok=True)
    (out / place).write_text("keep me\n")
    before = tree_digest(out)
    proc = ampfront("run", study, "--out", out, "--overwrite")
    line = one_line(proc)
    assert proc.returncode == 2 and place.split("/")[-1] in line or place.rsplit("/", 1)[0] in line, line
    assert tree_digest(out) == before


def test_empty_folder_is_used_and_follows_the_umask(tmp_path):
    study = _study(tmp_path)
    out = tmp_path / "empty"
    out.mkdir()
    assert ampfront("run", study, "--out", out).returncode == 0
    assert (out / "report.html").is_file()
    mask = os.umask(0)
    os.umask(mask)
    assert (out.stat().st_mode & 0o777) == 0o777 & ~mask   # not mkdtemp's private 0700


def test_byte_order_mark_is_accepted(tmp_path):
    study = tmp_path / "bom.toml"
    study.write_bytes(b"\xef\xbb\xbf" + TINY_STUDY.encode())
    proc = ampfront("run", study, "--out", tmp_path / "out")
    assert proc.returncode == 0, proc.stderr
