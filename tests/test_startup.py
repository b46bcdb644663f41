"""Start-up: importing archivist and asking for help load no geospatial library.

Each case runs in a fresh interpreter (a subprocess), since this test
session has long since imported everything. Only which modules are loaded
is checked, never how long it takes.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import archivist

HEAVY = ("geopandas", "shapely", "pyogrio", "pyproj", "fiona", "pandas", "numpy")
REPO = Path(archivist.__file__).resolve().parent.parent

PROBE = """
import json, sys
HEAVY = {heavy!r}
def loaded():
    return sorted(m for m in HEAVY if m in sys.modules)
import archivist
after_import = loaded()
from archivist.cli import main
sys.argv = ["archivist", *{args!r}]
try:
    main()
except SystemExit as exc:
    code = exc.code
else:
    code = 0
print(json.dumps({{"after_import": after_import, "after_help": loaded(), "code": code}}))
"""


def probe(*args: str) -> dict:
    code = PROBE.format(heavy=HEAVY, args=list(args))
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize("args", [["--help"], ["--version"], ["check", "--help"], ["pack", "--help"], ["audit", "--help"], ["unpack", "--help"], ["diff", "--help"]],
                         ids=" ".join)
def test_import_and_help_load_no_geospatial_library(args):
    seen = probe(*args)
    assert seen["code"] == 0
    assert seen["after_import"] == []
    assert seen["after_help"] == []


def test_the_lazy_names_are_the_api():
    """Every public name resolves, and ``archivist.diff`` stays the function after its module is imported."""
    import archivist.diff  # noqa: F401  (binds the submodule, as the import system does)
    from archivist.diff import diff as diff_function
    from archivist.engine import check

    assert archivist.diff is diff_function and archivist.check is check
    for name in archivist.__all__:
        assert getattr(archivist, name) is not None, name
    with pytest.raises(AttributeError):
        archivist.no_such_name  # noqa: B018
