"""Structured files from outside are read within limits on size, depth and alias expansion.

The alias bomb is the "billion laughs" shape in YAML (nine anchors, each a
list of nine aliases to the one before: 9**10 values once expanded); PyYAML
6's composer returns the anchored node for every alias (yaml/composer.py,
``compose_node``), so the bomb parses into a small shared graph that explodes
when walked as a tree. Each limit is checked from both sides.
"""

import json
import resource
import subprocess
import sys
import textwrap
import tomllib

import pytest
import yaml

from archivist import safeparse as sp
from archivist.errors import ArchivistError


def alias_bomb(levels: int = 9, width: int = 9) -> str:
    """A YAML document whose last anchor expands to width**(levels+1) scalars (about 540 bytes for 9 x 9)."""
    lines = ["cff-version: 1.2.0", "title: Invented survey of Glenmarrow", f"x0: &a0 [{', '.join(['lol'] * width)}]"]
    for i in range(1, levels + 1):
        lines.append(f"x{i}: &a{i} [{', '.join([f'*a{i - 1}'] * width)}]")
    lines += [f"license: *a{levels}", f"abstract: *a{levels}"]
    return "\n".join(lines) + "\n"


def merge_bomb(levels: int = 30) -> str:
    """Merge keys (YAML 1.1 '<<') doubling a mapping per level: SafeConstructor.flatten_mapping copies the pairs."""
    lines = ["m0: &m0 {a: 1, b: 2}"]
    for i in range(1, levels + 1):
        lines.append(f"m{i}: &m{i} {{<<: [*m{i - 1}, *m{i - 1}], k{i}: {i}}}")
    return "\n".join(lines) + "\n"


def test_alias_bomb_refused_before_expansion():
    bomb = alias_bomb()
    assert len(bomb) < 1024
    with pytest.raises(sp.LimitExceeded, match=r"^CITATION.cff: its aliases expand to more than 1 000 000 values"):
        sp.load_yaml(bomb, "CITATION.cff")


def test_merge_key_bomb_refused():
    with pytest.raises(sp.LimitExceeded, match="aliases expand"):
        sp.load_yaml(merge_bomb(), "CITATION.cff")


def test_aliases_below_the_cap_are_read_as_pyyaml_reads_them():
    small = alias_bomb(levels=3, width=3)  # 3**4 = 81 scalars expanded
    assert sp.load_yaml(small, "x.cff") == yaml.safe_load(small)
    merged = "base: &b {unit: Ka, name: Alder}\nother: {<<: *b, name: Birch}\n"
    assert sp.load_yaml(merged) == yaml.safe_load(merged) == {"base": {"unit": "Ka", "name": "Alder"}, "other": {"unit": "Ka", "name": "Birch"}}


def test_recursive_alias_refused():
    with pytest.raises(sp.LimitExceeded, match="recursive alias"):
        sp.load_yaml("a: &a [1, *a]\n", "x.cff")


def test_yaml_errors_and_unsafe_tags_stay_yaml_errors():
    with pytest.raises(yaml.YAMLError):
        sp.load_yaml("a: [1, 2\n", "x.cff")
    with pytest.raises(yaml.YAMLError):  # SafeLoader constructs no Python objects
        sp.load_yaml("a: !!python/object/apply:os.system ['true']\n", "x.cff")


@pytest.mark.parametrize(
    "load,text,kind",
    [
        (sp.load_json, "[" * 100_000 + "]" * 100_000, "JSON"),
        (sp.load_json, '{"a":' * 129 + "1" + "}" * 129, "JSON"),
        (sp.load_toml, "a = " + "[" * 100_000 + "]" * 100_000, "TOML"),
        (sp.load_toml, "[" + ".".join(["k"] * 5_000) + "]\nx = 1\n", "TOML"),  # dotted keys: deep without recursion
        (sp.load_yaml, "[" * 100_000 + "]" * 100_000, "YAML"),
    ],
    ids=["json-100000", "json-129", "toml-arrays", "toml-dotted", "yaml-100000"],
)
def test_too_deep_refused_in_one_line(load, text, kind):
    with pytest.raises(sp.LimitExceeded) as info:
        load(text, "deep.file")
    assert str(info.value) == f"deep.file: nested more than {sp.MAX_DEPTH} levels deep, over the limit; not read"
    assert isinstance(info.value, ArchivistError)


def test_depth_at_the_cap_is_read():
    text = '{"a":' * (sp.MAX_DEPTH - 1) + "1" + "}" * (sp.MAX_DEPTH - 1)
    assert sp.load_json(text, "ok.json") == json.loads(text)
    toml_text = "[" + ".".join(["k"] * (sp.MAX_DEPTH - 1)) + "]\nx = 1\n"
    assert sp.load_toml(toml_text, "ok.toml") == tomllib.loads(toml_text)


def test_size_cap_is_read_no_further(tmp_path):
    path = tmp_path / "big.json"
    path.write_bytes(b"[" + b"1," * 600 + b"1]")
    assert len(sp.load_json(path, max_bytes=2_000)) == 601
    with pytest.raises(sp.LimitExceeded, match=r"big.json: larger than 1000 bytes, the limit for a JSON file"):
        sp.load_json(path, max_bytes=1_000)


def test_huge_integer_is_a_limit_not_a_traceback():
    # Python refuses int() of more than 4300 digits (sys.int_info.default_max_str_digits)
    with pytest.raises(sp.LimitExceeded, match="4300 digits"):
        sp.load_json("1" * 5_000, "n.json")
    with pytest.raises(sp.LimitExceeded, match="4300 digits"):
        sp.load_toml("n = " + "1" * 5_000, "n.toml")


def test_syntax_errors_are_the_parsers_own():
    with pytest.raises(json.JSONDecodeError):
        sp.load_json("{", "x.json")
    with pytest.raises(tomllib.TOMLDecodeError):
        sp.load_toml("a = ", "x.toml")


def test_alias_bomb_audited_within_one_gib_of_address_space(tmp_path):
    """The whole audit of an archive holding the bomb, in a process capped at 1 GiB: it ends with a finding."""
    root = tmp_path / "bomb"
    root.mkdir()
    (root / "legend.csv").write_text("unit,name\nKa,Alder sandstone\n", encoding="utf-8")
    (root / "CITATION.cff").write_text(alias_bomb(), encoding="utf-8")
    cap = 1024**3

    def limit():
        resource.setrlimit(resource.RLIMIT_AS, (cap, cap))

    code = "import sys; from archivist.cli import main; sys.exit(main())"
    result = subprocess.run(
        [sys.executable, "-c", code, "audit", str(root), "--format", "json"],
        capture_output=True, text=True, preexec_fn=limit, timeout=600,
    )
    assert "Traceback" not in result.stderr and "MemoryError" not in result.stderr, result.stderr[-2000:]
    assert result.returncode == 1, result.stderr
    findings = json.loads(result.stdout)["findings"]
    (hit,) = [f for f in findings if f["rule"] == "archive-file-unopened"]
    assert hit["message"].startswith("CITATION.cff was not opened: its aliases expand to more than 1 000 000 values")
