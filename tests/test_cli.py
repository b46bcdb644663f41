"""The command line: exit codes, formats, one-line errors, outputs never in the project."""

import builtins
import errno
import io
import json
import os
import re
import unicodedata
import signal
import sys
from pathlib import Path

import jsonschema
import pytest
from click.testing import CliRunner

import archivist
from archivist.cli import cli
from archivist.manifest import load_schema
from builders import edit_manifest, tiny_legend, tiny_project, tree_digest, two_units

COMMANDS = sorted(cli.commands)


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], catch_exceptions=False)


@pytest.mark.parametrize("command", COMMANDS)
def test_help_for_every_command(command):
    result = run(command, "--help")
    assert result.exit_code == 0
    assert "Usage:" in result.output


def test_clean_project_exits_0_and_json_validates(tmp_path):
    root = tiny_project(tmp_path)
    result = run("check", root, "--format", "json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    jsonschema.validate(data, load_schema("report.schema.json"))
    assert data["summary"]["errors"] == 0


def test_errors_exit_1(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}})
    result = run("check", root)
    assert result.exit_code == 1
    assert "licence-unknown" in result.output


def test_strict_makes_warnings_fail(tmp_path):
    root = tiny_project(tmp_path, manifest={"map": {"abstract": ""}})
    assert run("check", root, "--only", "metadata").exit_code == 0
    assert run("check", root, "--only", "metadata", "--strict").exit_code == 1


@pytest.mark.parametrize(
    "args, words",
    [
        (["check", "no/such/place"], "no/such/place"),
        (["check", "{root}", "--only", "geology"], "family 'geology'"),
        (["check", "{root}", "--rule", "no-such-rule"], "rule 'no-such-rule'"),
        (["rules", "no-such-rule"], "no-such-rule"),
    ],
)
def test_cannot_run_is_one_line_exit_2(args, words, tmp_path):
    root = tiny_project(tmp_path)
    result = CliRunner().invoke(cli, [a.format(root=root) for a in args])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and words in lines[0] and "Traceback" not in result.output


def test_toml_syntax_error_is_one_line_exit_2(tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").write_text('[map]\ntitle = "unclosed\n', encoding="utf-8")
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["check", str(root)])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert "archivist.toml" in line and "line 2" in line
    assert tree_digest(root) == before


def test_output_file_written_atomically_and_not_overwritten(tmp_path):
    root = tiny_project(tmp_path)
    out = tmp_path / "report.json"
    assert run("check", root, "--format", "json", "--output", out).exit_code == 0
    assert json.loads(out.read_text())["tool"] == "archivist"
    again = CliRunner().invoke(cli, ["check", str(root), "--output", str(out)])
    assert again.exit_code == 2 and "--force" in again.stderr
    assert run("check", root, "--output", out, "--force").exit_code == 0
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".report")] == []


def test_output_inside_project_refused(tmp_path):
    root = tiny_project(tmp_path)
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["check", str(root), "--output", str(root / "report.txt")])
    assert result.exit_code == 2 and "inside the project" in result.stderr
    assert tree_digest(root) == before


def test_text_report_layout(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY", "abstract": ""}})
    out = run("check", root, "--only", "metadata").output
    assert "\x1b[" not in out
    assert out.index("error") < out.index("warning")
    assert "1 error, 1 warning, 0 notices" in out
    assert out.rstrip().endswith("under local rules.")


def test_no_manifest_says_so_first(tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").unlink()
    out = run("check", root).output
    assert out.splitlines()[0].startswith("Note: No archivist.toml")


def test_rules_lists_every_rule_with_doc():
    from archivist.registry import all_rules

    out = run("rules").output
    for info in all_rules():
        assert info.id in out and info.title in out
    one = run("rules", "unit-overlap" if "unit-overlap" in out else "licence-unknown").output
    assert "Why it matters" in one and "Fix" in one


def test_example_bundle_json_is_valid_and_clean():
    from builders import BUNDLE

    before = tree_digest(BUNDLE)
    result = run("check", BUNDLE, "--format", "json")
    data = json.loads(result.output)
    jsonschema.validate(data, load_schema("report.schema.json"))
    assert data["summary"] == {"errors": 0, "warnings": 0, "notices": 0}, [f["message"] for f in data["findings"]]
    assert result.exit_code == 0
    assert tree_digest(BUNDLE) == before


@pytest.mark.parametrize(
    "toml, key",
    [
        ('map = "x"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n', "'map'"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = "big"\ncrs = "EPSG:32633"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n', "map.scale"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = 1000\ncrs = "EPSG:32633"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n'
         '[checks]\ntolerance = "a"\n', "checks.tolerance"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = 1000\ncrs = "EPSG:32633"\n[layers.units]\npath = "map.gpkg"\nlayer = "units"\n'
         '[checks.severity]\nunit-overlap = "loud"\n', "checks.severity.unit-overlap"),
        ('[map]\ntitle = "t"\nversion = "1"\nscale = 1000\ncrs = "EPSG:32633"\n[[map.authors]]\naffiliation = "nobody"\n'
         '[layers.units]\npath = "map.gpkg"\nlayer = "units"\n', "map.authors[0].name"),
    ],
)
def test_wrongly_typed_manifest_values_are_findings_not_crashes(toml, key, tmp_path):
    root = tiny_project(tmp_path)
    (root / "archivist.toml").write_text(toml, encoding="utf-8")
    before = tree_digest(root)
    result = CliRunner().invoke(cli, ["check", str(root), "--format", "json"])
    assert isinstance(result.exception, SystemExit), result.exception  # an uncaught error would show here
    assert result.exit_code == 1
    found = [f for f in json.loads(result.output)["findings"] if f["rule"] == "manifest-invalid"]
    assert any(key in f["message"] for f in found), [f["message"] for f in found]
    packed = CliRunner().invoke(cli, ["pack", str(root), "--out", str(tmp_path / "out")])
    assert isinstance(packed.exception, SystemExit) and packed.exit_code in (1, 2), packed.exception
    assert tree_digest(root) == before


# ---------------------------------------------------------------- what reaches the terminal
# A unit code that clears the screen (ESC [2J, ESC [H: ECMA-48 ED and CUP) and
# paints a fake clean report, a CR that returns to the start of the line, a
# BEL, a C1 CSI (U+009B), an OSC title change, and the bidi override U+202E
# and isolate U+2066 (Unicode UAX #9).
EVIL = "\x1b[2J\x1b[HNo findings.\r\x07\u202eKa\u2066\x9b<script>x</script>"
EVIL_NAME = "Alder\x1b]0;owned\x07 Sandstone"
EVIL_FILE = "map\x1b[31m\u202e.gpkg"
SGR = re.compile(r"\x1b\[[0-9;]*m")  # Select Graphic Rendition: the writer's own colour codes (ECMA-48 8.3.117)


def terminal_unsafe(text: str) -> list[str]:
    """Controls (Unicode category Cc, but the newline) and UAX #9 bidi controls in ``text``."""
    bidi = "\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
    return [c for c in text if (unicodedata.category(c) == "Cc" and c != "\n") or c in bidi]


def evil_project(tmp_path, name="evil", evil_file=True):
    """A project whose unit code, legend name and (with ``evil_file``) GeoPackage name carry terminal control sequences."""
    units = two_units()
    units["unit"] = ["A", EVIL]
    legend = tiny_legend()
    legend.loc[0, "name"] = EVIL_NAME
    root = tiny_project(tmp_path, units=units, legend=legend, name=name)
    if not evil_file:
        return root
    (root / "map.gpkg").rename(root / EVIL_FILE)

    def repath(m):
        for spec in m["layers"].values():
            spec["path"] = EVIL_FILE

    return edit_manifest(root, repath)


def test_check_text_shows_data_as_escapes(tmp_path):
    root = evil_project(tmp_path)
    result = CliRunner().invoke(cli, ["check", str(root)])
    assert result.exit_code == 1, result.output
    assert terminal_unsafe(result.output) == []
    assert terminal_unsafe(result.stderr) == []
    assert "\\x1b[2J\\x1b[HNo findings.\\r\\x07\\u202eKa\\u2066\\x9b" in result.output
    assert "Alder\\x1b]0;owned\\x07 Sandstone" in result.output or "legend-missing-unit" in result.output


def test_check_text_with_colour_has_only_its_own_colour_codes(tmp_path):
    from archivist import check
    from archivist.report import write_text

    report = check(evil_project(tmp_path))
    buf = io.StringIO()
    write_text(report, buf, color=True)
    out = buf.getvalue()
    assert SGR.search(out), "colour was forced, so colour codes are expected"
    assert terminal_unsafe(SGR.sub("", out)) == []


def test_check_json_keeps_the_exact_value(tmp_path):
    root = evil_project(tmp_path)
    result = CliRunner().invoke(cli, ["check", str(root), "--format", "json"])
    assert terminal_unsafe(result.output) == []
    data = json.loads(result.output)
    assert any(EVIL in f["message"] for f in data["findings"])
    assert data["project"].endswith("archivist.toml")


def test_html_escapes_data(tmp_path):
    root = evil_project(tmp_path)
    page = tmp_path / "report.html"
    result = CliRunner().invoke(cli, ["check", str(root), "--html", page])
    assert result.exit_code == 1
    text = page.read_text(encoding="utf-8")
    assert "<script>x</script>" not in text
    assert "&lt;script&gt;x&lt;/script&gt;" in text  # html.escape (Python docs): < > & as entities


def test_audit_text_shows_data_as_escapes(tmp_path):
    root = evil_project(tmp_path, evil_file=False)
    result = CliRunner().invoke(cli, ["audit", str(root)])
    assert result.exit_code in (0, 1), result.output
    assert terminal_unsafe(result.output) == [] and terminal_unsafe(result.stderr) == []
    assert "\\x1b[2J" in result.output
    # a member name with control characters is refused; the refusal line shows it as escapes
    refused = CliRunner().invoke(cli, ["audit", str(evil_project(tmp_path, name="evil2"))])
    assert refused.exit_code == 2
    (line,) = refused.stderr.strip().splitlines()
    assert terminal_unsafe(line) == [] and "\\x1b[31m" in line


def test_diff_text_shows_data_as_escapes(tmp_path):
    old = tiny_project(tmp_path, name="old")
    new = evil_project(tmp_path, name="new")
    result = CliRunner().invoke(cli, ["diff", str(old), str(new)])
    assert result.exit_code == 1, result.output
    assert terminal_unsafe(result.output) == [] and terminal_unsafe(result.stderr) == []
    assert "\\x1b[2J" in result.output
    as_json = CliRunner().invoke(cli, ["diff", str(old), str(new), "--format", "json"])
    assert terminal_unsafe(as_json.output) == []
    assert any(EVIL in c["message"] for c in json.loads(as_json.output)["changes"])


def test_progress_labels_show_file_names_as_escapes(tmp_path):
    root = evil_project(tmp_path)
    result = CliRunner().invoke(cli, ["check", str(root), "-v"])
    assert result.exit_code == 1
    assert "reading map\\x1b[31m\\u202e.gpkg" in result.stderr
    assert terminal_unsafe(result.stderr) == [] and terminal_unsafe(result.output) == []


@pytest.mark.parametrize("args", [["check", "{tmp}/no\x1b[2Jsuch\u202e"], ["check", "{root}", "--rule", "x\x1b[2J\r"],
                                  ["rules", "x\x1b[2J\u202e"], ["init", "{tmp}/no\x1b[2Jsuch"]])
def test_error_lines_show_values_as_escapes(args, tmp_path):
    root = tiny_project(tmp_path)
    result = CliRunner().invoke(cli, [a.format(tmp=tmp_path, root=root) for a in args])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert terminal_unsafe(line) == [] and "\\x1b[2J" in line


# ---------------------------------------------------------------- outputs that cannot be written
# Tests may run as root, for whom chmod does not stop a write: a read-only
# (EROFS), forbidden (EACCES) or full (ENOSPC) output folder is simulated by
# making every call that creates, writes or renames something in that folder
# fail with the error the kernel gives (errno names from POSIX, strerror from
# the C library through os.strerror).
_WRITE_FLAGS = os.O_WRONLY | os.O_RDWR | os.O_CREAT | os.O_APPEND | os.O_TRUNC


def refuse_writes_in(monkeypatch, folder: Path, err: int) -> None:
    folder = Path(folder).resolve()

    def inside(path) -> bool:
        try:
            p = Path(os.fsdecode(path)).resolve()
        except (TypeError, ValueError):
            return False
        return p == folder or folder in p.parents

    def refuse(path):
        raise OSError(err, os.strerror(err), os.fsdecode(path))

    real_open, real_mkdir, real_replace, real_rename, real_link = os.open, os.mkdir, os.replace, os.rename, os.link
    real_io_open = io.open

    def fake_open(path, flags, *args, **kwargs):
        if flags & _WRITE_FLAGS and inside(path):
            refuse(path)
        return real_open(path, flags, *args, **kwargs)

    def fake_mkdir(path, *args, **kwargs):
        if inside(path):
            refuse(path)
        return real_mkdir(path, *args, **kwargs)

    def two(real):
        def fake(src, dst, *args, **kwargs):
            if inside(dst):
                refuse(dst)
            return real(src, dst, *args, **kwargs)
        return fake

    def fake_io_open(file, mode="r", *args, **kwargs):
        if isinstance(file, (str, bytes, os.PathLike)) and set(mode) & set("wax+") and inside(file):
            refuse(file)
        return real_io_open(file, mode, *args, **kwargs)

    monkeypatch.setattr(os, "open", fake_open)
    monkeypatch.setattr(os, "mkdir", fake_mkdir)
    monkeypatch.setattr(os, "replace", two(real_replace))
    monkeypatch.setattr(os, "rename", two(real_rename))
    monkeypatch.setattr(os, "link", two(real_link))
    monkeypatch.setattr(io, "open", fake_io_open)
    monkeypatch.setattr(builtins, "open", fake_io_open)


OUTPUTS = {
    "check --output": (["check", "{root}", "--output", "{out}/report.json", "--format", "json"], "report.json"),
    "check --html": (["check", "{root}", "--html", "{out}/report.html"], "report.html"),
    "check --findings-gpkg": (["check", "{root}", "--findings-gpkg", "{out}/findings.gpkg"], "findings.gpkg"),
    "pack --out": (["pack", "{root}", "--out", "{out}"], "{out}"),
    "pack --zip": (["pack", "{root}", "--out", "{out}", "--zip"], "{out}"),
    "audit --output": (["audit", "{root}", "--output", "{out}/audit.txt"], "audit.txt"),
    "diff --output": (["diff", "{root}", "{root}", "--output", "{out}/changes.txt"], "changes.txt"),
    "diff --gpkg": (["diff", "{root}", "{root}", "--gpkg", "{out}/changes.gpkg"], "changes.gpkg"),
    "init": (["init", "{bare}"], "{bare}"),
}


def one_line_exit_2(result, name: str) -> str:
    assert result.exit_code == 2, (result.exit_code, result.output)
    assert "Traceback" not in result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and name in lines[0], result.stderr
    return lines[0]


@pytest.mark.parametrize("err", [errno.EROFS, errno.EACCES, errno.ENOSPC], ids=errno.errorcode.get)
@pytest.mark.parametrize("which", sorted(OUTPUTS))
def test_output_that_cannot_be_written_is_one_line_exit_2(which, err, tmp_path, monkeypatch):
    root = tiny_project(tmp_path)
    bare = tiny_project(tmp_path, name="bare")
    (bare / "archivist.toml").unlink()
    out = tmp_path / "out"
    out.mkdir()
    args, name = OUTPUTS[which]
    fill = {"root": root, "out": out, "bare": bare}
    target_folder = bare if which == "init" else out
    refuse_writes_in(monkeypatch, target_folder, err)
    result = CliRunner().invoke(cli, [a.format(**fill) for a in args])
    line = one_line_exit_2(result, name.format(**fill))
    assert os.strerror(err) in line
    assert sorted(p.name for p in out.iterdir()) == []


@pytest.mark.parametrize("which", ["check --output", "check --html", "check --findings-gpkg", "audit --output",
                                   "diff --output", "diff --gpkg"])
def test_output_under_a_file_is_one_line_exit_2(which, tmp_path):
    """A real case that holds for root too: the output's folder is a regular file (ENOTDIR)."""
    root = tiny_project(tmp_path)
    (tmp_path / "plain").write_text("not a folder\n", encoding="utf-8")
    args, name = OUTPUTS[which]
    result = CliRunner().invoke(cli, [a.format(root=root, out=tmp_path / "plain") for a in args])
    one_line_exit_2(result, str(tmp_path / "plain" / name))


def test_output_in_sysfs_real_case(tmp_path):
    """Another real case for root on Linux: the kernel refuses new files in /sys (sysfs) with EACCES."""
    root = tiny_project(tmp_path)
    result = CliRunner().invoke(cli, ["check", str(root), "--output", "/sys/archivist-report.json"])
    one_line_exit_2(result, "/sys/archivist-report.json")


def test_an_internal_error_is_one_line_and_never_exit_1(tmp_path, monkeypatch):
    import archivist.engine

    def broken(*args, **kwargs):
        raise ZeroDivisionError("division by zero")

    root = tiny_project(tmp_path)
    monkeypatch.setattr(archivist.engine, "run_rules", broken)
    monkeypatch.delenv("ARCHIVIST_TRACEBACK", raising=False)
    result = CliRunner().invoke(cli, ["check", str(root)])
    line = one_line_exit_2(result, "internal error")
    assert "ZeroDivisionError" in line and "ARCHIVIST_TRACEBACK=1" in line
    monkeypatch.setenv("ARCHIVIST_TRACEBACK", "1")
    shown = CliRunner().invoke(cli, ["check", str(root)])
    assert isinstance(shown.exception, ZeroDivisionError)


# ---------------------------------------------------------------- stopped runs: one line, nothing half-written

STOPPABLE = """
import pathlib, sys, time
import archivist.fsutil as fsutil
real = fsutil.Path.write_text
flag = pathlib.Path(sys.argv[1])

def slow_write(self, text, *a, **k):
    out = real(self, text, *a, **k)
    if self.name.endswith(".part"):
        real(flag, "writing")  # tell the test the temporary sibling exists
        time.sleep(60)
    return out

fsutil.Path.write_text = slow_write
from archivist.cli import main
sys.argv = ["archivist", *sys.argv[2:]]
main()
"""


@pytest.mark.slow
@pytest.mark.parametrize("how, code", [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_a_stopped_check_leaves_no_partial_output_and_says_so_in_one_line(tmp_path, how, code):
    """SIGTERM (a scheduler's limit, kill) and Ctrl-C while the report is being written.

    Exit codes 128 + the signal number are the shells' convention (common practice).
    """
    import subprocess
    import time

    root = tiny_project(tmp_path)
    out = tmp_path / "out"
    out.mkdir()
    flag = tmp_path / "flag"
    env = {**os.environ, "PYTHONPATH": str(Path(archivist.__file__).parent.parent)}
    proc = subprocess.Popen(
        [sys.executable, "-c", STOPPABLE, str(flag), "check", str(root), "--output", str(out / "report.txt")],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
    )
    deadline = time.monotonic() + 120
    while not flag.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert flag.exists(), proc.communicate()
    proc.send_signal(how)
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == code, stderr
    assert "Traceback" not in stderr
    (line,) = stderr.strip().splitlines()
    assert line.startswith("archivist: ") and "not written" in line
    assert list(out.iterdir()) == []  # neither the report nor its temporary sibling


# ---------------------------------------------------------------- help that reads whole

def test_every_command_summary_is_shown_whole_in_the_command_list():
    """click cuts a short help that is too long for the list (``...``): every summary is a whole sentence that fits."""
    listing = run("--help").output
    for name, command in cli.commands.items():
        summary = command.get_short_help_str(limit=1000)
        assert summary.endswith(".") and "..." not in summary, (name, summary)
        assert re.search(rf"^  {name}\s+{re.escape(summary)}$", listing, re.M), (name, summary)


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_help_shows_its_first_sentence_whole(command):
    out = run(command, "--help").output
    first = " ".join(cli.commands[command].help.split("\n\n")[0].split())
    assert first in " ".join(out.split()), (command, first)


@pytest.mark.parametrize("command, families", [
    ("check", "metadata, topology, linework, crs, legend, samples, structures, stations, photos, literature."),
    ("audit", "metadata, topology, linework, crs, legend, samples, structures, stations, photos, literature, archive."),
])
def test_only_help_names_the_families(command, families):
    from archivist.registry import FAMILIES

    out = " ".join(run(command, "--help").output.split())
    assert f"--only FAMILY Run only this rule family (repeatable): {families}" in out
    assert all(f in families for f in FAMILIES if f != "archive")


# ---------------------------------------------------------------- a summary that fits a terminal

def misfit_grid(tmp_path, n=12):
    """An n x n grid of 10 m squares, A and B alternating; every other column's east edge drawn 0.3 m too far.

    Each misdrawn edge overlaps its neighbour by a strip 0.3 m wide, under the 1 m tolerance of 1:10 000:
    hundreds of findings, most of them of two rules on one layer.
    """
    import geopandas as gpd
    from shapely.geometry import LineString, box

    cells, codes = [], []
    for i in range(n):
        for j in range(n):
            x0, y0 = i * 10.0, j * 10.0
            cells.append(box(x0, y0, x0 + 10.3 if (i % 2 == 0 and i < n - 1) else x0 + 10, y0 + 10))
            codes.append("A" if (i + j) % 2 else "B")
    units = gpd.GeoDataFrame({"unit": codes}, geometry=cells, crs="EPSG:32633")
    lines = gpd.GeoDataFrame({"kind": ["map-boundary"], "certainty": ["certain"]},
                             geometry=[LineString(box(0, 0, n * 10.0, n * 10.0).exterior.coords)], crs="EPSG:32633")
    return tiny_project(tmp_path, units=units, lines=lines)


def test_summary_fits_a_terminal_and_details_list_everything(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    root = misfit_grid(tmp_path, n=16)  # 8 misdrawn columns of 16 edges: over 100 findings
    findings = json.loads(run("check", root, "--format", "json").output)["findings"]
    assert len(findings) > 100
    short = run("check", root)
    assert short.exit_code == 1
    lines = short.output.splitlines()
    assert len(lines) <= 25, short.output
    assert short.output.rstrip().endswith("under local rules.")
    assert f"Every finding: --details (text) or --format json ({len(findings)} findings)." in lines
    # one line per rule and layer, with the number of places and the largest of them
    mismatches = [f for f in findings if f["rule"] == "unit-edge-mismatch"]
    largest = max(mismatches, key=lambda f: f["measure"])
    line = (f"  error   unit-edge-mismatch on units: {len(mismatches)} places, "
            f"largest {largest['measure']:.2f} m at {largest['x']:.1f}, {largest['y']:.1f}")
    assert line in lines, short.output
    full = run("check", root, "--details").output
    assert full.startswith(short.output.rsplit("Every finding:", 1)[0])  # the same summary first
    for f in findings:
        assert f["message"] in full
    assert full.rstrip().endswith("under local rules.")


def test_counts_are_in_the_singular_for_one(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    root = tiny_project(tmp_path, manifest={"map": {"licence": "CC-BY"}})
    out = run("check", root, "--only", "metadata").output
    assert "1 error, 0 warnings, 0 notices from " in out
    assert re.search(r"^  error   licence-unknown: ", out, re.M)


# ---------------------------------------------------------------- one map file, no manifest

def test_check_one_geopackage_guesses_roles_and_writes_nothing(tmp_path):
    """``check map.gpkg`` reads that file as ``init map.gpkg`` does: the same findings as its folder without a manifest."""
    root = tiny_project(tmp_path)
    (root / "archivist.toml").unlink()
    (root / "legend.csv").unlink()
    before = tree_digest(root)
    alone = run("check", root / "map.gpkg", "--format", "json")
    assert alone.exit_code in (0, 1), alone.output
    data = json.loads(alone.output)
    jsonschema.validate(data, load_schema("report.schema.json"))
    assert data["project"] == str(root / "map.gpkg")
    assert data["notes"][0] == (f"{root / 'map.gpkg'} checked without a manifest: the roles of its layers were guessed "
                                f"from the data; 'archivist init {root / 'map.gpkg'}' writes them into an archivist.toml to confirm.")
    folder = json.loads(run("check", root, "--format", "json").output)
    assert data["findings"] == folder["findings"] and data["rules_run"] == folder["rules_run"]
    assert tree_digest(root) == before
    text = run("check", root / "map.gpkg").output
    assert text.startswith(f"Note: {root / 'map.gpkg'} checked without a manifest")


def test_check_a_file_that_is_not_a_map_is_one_line_exit_2(tmp_path):
    (tmp_path / "notes.txt").write_text("field notes\n", encoding="utf-8")
    result = CliRunner().invoke(cli, ["check", str(tmp_path / "notes.txt")])
    assert result.exit_code == 2
    (line,) = result.stderr.strip().splitlines()
    assert line.endswith("notes.txt: expected a project folder, its archivist.toml or a map file (GeoPackage, shapefile, GeoJSON...)")
