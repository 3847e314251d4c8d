"""Technology files and results folders are data, never programs: each bad one is one line and exit 2, and
nothing they hold reaches a netlist or ngspice unless ampfront wrote it itself.

References: ngspice (Debian package `ngspice`), which would execute a `.control ... shell` block if one
reached a deck (the marker file below is how that would show); the rules are the project's own (README).
"""

import json
import shutil

import numpy as np
import pytest

from ampfront.topologies.process.techfile import shipped

from .clirun import TINY_STUDY, ampfront, one_line

GENERIC = shipped()["generic180"].read_text()
INJECTED_NAME = 'name = "evil\\n.control\\nshell touch {marker}\\n.endc"'

BAD_TECHNOLOGIES = {
    "name_injects_control": lambda m: GENERIC.replace('name = "generic180"', INJECTED_NAME.format(marker=m)),
    "name_with_semicolon": lambda m: GENERIC.replace('name = "generic180"', 'name = "a;b c"'),
    "description_two_lines": lambda m: GENERIC.replace(
        'description = "Generic', 'description = "line one\\n.control\\nshell touch ' + str(m) + '\\n.endc Generic'),
    "unknown_kind": lambda m: GENERIC.replace('kind = "square_law"', 'kind = "magic"'),
    "missing_nmos": lambda m: GENERIC.split("[nmos]")[0],
    "l_min_above_l_max": lambda m: GENERIC.replace('l_max = "10 um"', 'l_max = "0.1 um"'),
    "negative_kp": lambda m: GENERIC.replace('kp = "270 uA/V^2"', 'kp = "-270 uA/V^2"'),
    "wrong_unit": lambda m: GENERIC.replace('vto = "0.45 V"', 'vto = "0.45 A"'),
    "unknown_key": lambda m: GENERIC.replace('supply = "1.8 V"', 'supply = "1.8 V"\nsuply = "1.8 V"'),
    "not_toml": lambda m: "name = [unclosed\n",
    "table_kind_unknown_library": lambda m: (
        'name = "x"\nkind = "gm_id_tables"\nsupply = "1.8 V"\nw_min = "1 um"\ncap_density = "2 fF/um^2"\n'
        'library = "acme"\ndefault_corner = "tt"\n[corners.tt]\ntemperature = "27 degC"\nnmos = "a.npz"\n'
        'pmos = "b.npz"\n'),
    "binary": lambda m: "\x00\x01\x02garbage",
}


@pytest.mark.parametrize("case", sorted(BAD_TECHNOLOGIES))
def test_bad_technology_file_is_one_line(case, tmp_path):
    marker = tmp_path / "INJECTED"
    tech = tmp_path / "bad_process.toml"
    tech.write_text(BAD_TECHNOLOGIES[case](marker))
    study = tmp_path / "study.toml"
    study.write_text(TINY_STUDY.replace('technology = "generic180"', 'technology = "bad_process.toml"'))
    proc = ampfront("run", study, "--out", tmp_path / "out")
    line = one_line(proc)
    assert proc.returncode == 2 and "bad_process.toml" in line and "expected" in line
    assert not (tmp_path / "out").exists() and not marker.exists()


def _rewrite_table(path, change):
    """Write the table file at `path` again with its meta record changed by `change(meta)`."""
    with np.load(path) as data:
        arrays = {k: data[k] for k in data.files}
    meta = json.loads(str(arrays["meta"]))
    change(meta)
    arrays["meta"] = np.array(json.dumps(meta))
    np.savez(path, **arrays)


def _inject_device(marker):
    return lambda meta: meta.update(device=f"sky130_fd_pr__nfet_01v8\n.control\nshell touch {marker}\n.endc")


BAD_TABLES = {
    "device_name_injects_control": lambda path, marker: _rewrite_table(path, _inject_device(marker)),
    "device_name_with_spaces": lambda path, marker: _rewrite_table(path, lambda m: m.update(device="nfet 01v8")),
    "polarity_swapped": lambda path, marker: _rewrite_table(path, lambda m: m.update(polarity="p")),
    "garbage": lambda path, marker: path.write_bytes(b"PK\x03\x04 not a zip archive at all"),
    "without_meta": lambda path, marker: np.savez(path, id=np.zeros(3)),
    "meta_not_json": lambda path, marker: np.savez(path, meta=np.array("{not json")),
}


@pytest.mark.parametrize("case", sorted(BAD_TABLES))
def test_bad_table_file_is_one_line(case, tmp_path):
    """A table technology's .npz files are data too: the device name they carry becomes a subcircuit name
    in every netlist, so anything but a SPICE identifier is refused at load, as is a file that is not a table."""
    marker = tmp_path / "INJECTED"
    data = shipped()["sky130"].parent
    shutil.copy(shipped()["sky130"], tmp_path / "process.toml")
    shutil.copytree(data / "sky130", tmp_path / "sky130")
    table = tmp_path / "sky130" / "sky130_fd_pr__nfet_01v8__tt__27C.npz"
    BAD_TABLES[case](table, marker)
    study = tmp_path / "study.toml"
    study.write_text(TINY_STUDY.replace('technology = "generic180"', 'technology = "process.toml"'))
    proc = ampfront("run", study, "--out", tmp_path / "out")
    line = one_line(proc)
    assert proc.returncode == 2 and "sky130_fd_pr__nfet_01v8__tt__27C.npz" in line and "expected" in line, line
    assert not (tmp_path / "out").exists() and not marker.exists()


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    """A small result folder of our own, written once, copied for every tampering."""
    folder = tmp_path_factory.mktemp("received")
    (folder / "study.toml").write_text(TINY_STUDY.replace("population = 8", "population = 12"))
    proc = ampfront("run", folder / "study.toml", "--out", folder / "result")
    assert proc.returncode == 0, proc.stderr
    return folder / "result"


def _front(folder):
    return (folder / "front.csv").read_text().splitlines()


def _design(folder):
    return _front(folder)[1].split(",")[1]


def _edit_manifest(change):
    def edit(folder, marker):
        path = folder / "manifest.json"
        manifest = json.loads(path.read_text())
        change(manifest)
        path.write_text(json.dumps(manifest))
    return edit


def _inject_testbench(folder, marker):
    tb = folder / "netlists" / f"{_design(folder)}_tb.sp"
    tb.write_text(tb.read_text().replace(".control", f".control\nshell touch {marker}", 1))


def _edit_front(change):
    def edit(folder, marker):
        lines = _front(folder)
        (folder / "front.csv").write_text("\n".join(change(lines)) + "\n")
    return edit


def _column(lines, name, value):
    header = lines[0].split(",")
    k = header.index(name)
    row = lines[1].split(",")
    row[k] = value
    return [lines[0], ",".join(row), *lines[2:]]


TAMPERED = {
    "no_manifest": (lambda f, m: (f / "manifest.json").unlink(), "manifest.json"),
    "manifest_not_json": (lambda f, m: (f / "manifest.json").write_text("{not json"), "manifest.json"),
    "manifest_a_list": (lambda f, m: (f / "manifest.json").write_text("[1, 2]"), "manifest.json"),
    "manifest_of_another_tool": (_edit_manifest(lambda d: d.update(tool="other")), "manifest.json"),
    "manifest_without_study_text": (_edit_manifest(lambda d: d["study"].pop("text")), "manifest.json"),
    "study_text_not_toml": (_edit_manifest(lambda d: d["study"].update(text="[spec")), "(file)"),
    "technology_changed": (_edit_manifest(lambda d: d["technology"].update(sha256="0" * 64)), "technology"),
    "no_front": (lambda f, m: (f / "front.csv").unlink(), "front.csv"),
    "front_empty": (lambda f, m: (f / "front.csv").write_text(""), "front.csv"),
    "front_binary": (lambda f, m: (f / "front.csv").write_bytes(b"\x00\xff\xfe\x00garbage\x89"), "front.csv"),
    "front_without_design": (_edit_front(lambda ls: [ln.replace("design", "dezign", 1) for ln in ls]), "design"),
    "design_name_is_a_path": (_edit_front(lambda ls: _column(ls, "design", "../../escape")), "design"),
    "topology_not_in_study": (_edit_front(lambda ls: _column(ls, "topology", "folded_cascode")), "topology"),
    "design_variable_not_a_number": (_edit_front(lambda ls: _column(ls, "x_i_tail", "lots")), "x_i_tail"),
    "design_variable_missing": (_edit_front(lambda ls: [ln.replace("x_l_in", "x_l_zz") for ln in ls]), "x_l_in"),
    "testbench_runs_a_shell": (_inject_testbench, "_tb.sp"),
    "testbench_binary": (lambda f, m: (f / "netlists" / f"{_design(f)}_tb.sp").write_bytes(b"\x00\xff" * 50), "_tb.sp"),
    "subcircuit_edited": (lambda f, m: (f / "netlists" / f"{_design(f)}.sp").write_text(
        (f / "netlists" / f"{_design(f)}.sp").read_text().replace(".ends", "Vx out 0 0\n.ends")), ".sp"),
}


@pytest.mark.spice
@pytest.mark.parametrize("case", sorted(TAMPERED))
def test_tampered_result_folder_is_refused(case, result, tmp_path):
    folder = tmp_path / "received"
    shutil.copytree(result, folder)
    marker = tmp_path / "INJECTED"
    tamper, key = TAMPERED[case]
    tamper(folder, marker)
    proc = ampfront("check", folder, "--designs", "2")
    line = one_line(proc)
    assert proc.returncode == 2 and key in line and "expected" in line, line
    assert not marker.exists()


@pytest.mark.spice
def test_folder_without_netlists_is_rebuilt_and_checked(result, tmp_path):
    """Received without its netlists (or with a stale sweep output beside them): check writes its own."""
    folder = tmp_path / "received"
    shutil.copytree(result, folder)
    design = _design(folder)
    (folder / "netlists" / f"{design}_swing.dat").write_text("0 0\n1 1\n")   # stale, and wrong
    proc = ampfront("check", folder, "--designs", "2")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    shutil.rmtree(folder / "netlists")
    proc = ampfront("check", folder, "--designs", "2")
    assert proc.returncode == 0 and proc.stdout.count("agrees [ok]") == 2, proc.stdout + proc.stderr
