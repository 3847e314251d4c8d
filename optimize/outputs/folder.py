"""The output folder: checked before any work starts, written all-or-nothing, and never allowed to destroy
anything ampfront did not write.

A folder may be replaced only when its manifest says ampfront wrote it, it holds nothing but what ampfront
writes, and the user asked for it (`--overwrite`). An empty folder is used as it is.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from ampfront.topologies.errors import InputError

MANIFEST = "manifest.json"
CLOSEST = "closest.csv"   # beside a feasible front: the closest designs of the topologies that met nothing
FIGURES = "figures"       # static SVGs of the report's plots, for slides
# Everything `ampfront run` and `ampfront check` write into a result folder.
OWN_ENTRIES = frozenset({MANIFEST, "front.csv", "report.html", "netlists", "check.csv", CLOSEST, FIGURES})
TOOL_MARK = "ampfront"


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def is_result_folder(folder: Path) -> bool:
    try:
        manifest = json.loads((folder / MANIFEST).read_text(encoding="utf-8"))
    except (OSError, ValueError, UnicodeDecodeError):
        return False
    return isinstance(manifest, dict) and manifest.get("tool") == TOOL_MARK


def check_destination(out: Path, overwrite: bool, protect: tuple[Path, ...] = (), option: str = "--out") -> Path:
    """Refuse, before any search, a destination ampfront may not write; return it resolved.

    `protect` holds inputs (the study file) that must not sit inside what would be replaced."""
    source = str(out)
    try:
        final = out.expanduser().resolve()
    except (OSError, RuntimeError):
        raise InputError(source, option, "a folder path that can be resolved") from None
    if final.exists() and not final.is_dir():
        raise InputError(source, option, "a folder (this is an existing file, which ampfront leaves alone)")
    if final.is_dir():
        entries = sorted(p.name for p in final.iterdir())
        if entries:
            if not is_result_folder(final):
                raise InputError(source, option, "a new or empty folder, or an earlier ampfront result "
                                 f"(this folder holds other files, e.g. '{entries[0]}', which ampfront never replaces)")
            foreign = [e for e in entries if e not in OWN_ENTRIES] or _foreign_inside(final)
            if foreign:
                raise InputError(source, option, f"an ampfront result holding only its own files (found '{foreign[0]}'; "
                                 "move it away first)")
            if not overwrite:
                raise InputError(source, option, "a new folder, or --overwrite to replace this earlier ampfront result")
        for path in protect:
            try:
                inside = path.resolve().is_relative_to(final)
            except OSError:
                inside = False
            if inside:
                raise InputError(source, option, f"a folder that does not hold the input {path.name}")
    # Probe the nearest folder that exists: creating the missing parents is left to the write itself, so a
    # run refused later (a bad technology, say) leaves no empty folders behind.
    existing = final.parent
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent
    try:
        if not existing.is_dir():
            raise NotADirectoryError(f"{existing} is not a folder")
        probe = tempfile.mkdtemp(prefix=f".{final.name}.probe-", dir=existing)
        os.rmdir(probe)
    except OSError as error:
        raise InputError(source, option, f"a folder ampfront can create and write ({error.strerror or error})") from None
    return final


def written_files(folder: Path) -> list[str]:
    """Every file inside the result's own sub-folders, relative to it (for the manifest)."""
    return sorted(str(p.relative_to(folder)) for name in sorted(OWN_ENTRIES) if (folder / name).is_dir()
                  for p in (folder / name).rglob("*") if not p.is_dir())


# Results written before manifests listed their files: what their sub-folders could hold.
_OWN_FILE = re.compile(r"^[A-Za-z0-9_.+-]+\.(sp|svg|png)$")


def _foreign_inside(folder: Path) -> list[str]:
    """Files in an earlier result's sub-folders that its manifest does not list as written by ampfront."""
    try:
        listed = json.loads((folder / MANIFEST).read_text(encoding="utf-8")).get("files")
    except (OSError, ValueError, UnicodeDecodeError, AttributeError):
        listed = None
    ours = set(listed) if isinstance(listed, list) else None
    found = []
    for name in sorted(OWN_ENTRIES):
        sub = folder / name
        if not sub.is_dir() or sub.is_symlink():
            continue
        for p in sorted(q for q in sub.rglob("*") if not q.is_dir()):
            relative = str(p.relative_to(folder))
            if ours is not None:
                mine = relative in ours
            else:
                mine = p.parent == sub and _OWN_FILE.match(p.name) is not None
            if not mine:
                found.append(relative)
    return found


@contextmanager
def staged_directory(final: Path):
    """Yield a temporary folder beside `final`; move it into place only if the block succeeds.

    The caller has passed `final` through check_destination: it is absent, empty, or an earlier result that
    may be replaced. The earlier result is moved aside and removed only after the new one is in place."""
    final = final.resolve()
    final.parent.mkdir(parents=True, exist_ok=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{final.name}.", dir=final.parent))
    # mkdtemp makes the folder private (0700); a result folder follows the user's umask like any other.
    os.chmod(stage, 0o777 & ~_umask())
    try:
        yield stage
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise
    old = None
    if final.exists():
        if any(final.iterdir()) and not is_result_folder(final):
            shutil.rmtree(stage, ignore_errors=True)
            raise InputError(str(final), "--out", "a folder that still holds only an ampfront result")
        old = final.with_name(f".{final.name}.old-{os.getpid()}")
        final.rename(old)
    stage.rename(final)
    if old is not None:
        _remove_own(old)


def _remove_own(folder: Path) -> None:
    """Remove a replaced result: only the entries ampfront writes, then the folder if that empties it."""
    for entry in folder.iterdir():
        if entry.name not in OWN_ENTRIES:
            continue
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry, ignore_errors=True)
        else:
            entry.unlink(missing_ok=True)
    try:
        folder.rmdir()
    except OSError:
        pass   # something not ours appeared meanwhile: leave it, with the folder, where the user can see it


def write_text_atomic(path: Path, text: str) -> None:
    """Write beside the target, then move into place, so a reader never sees half a file."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)
