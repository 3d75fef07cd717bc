"""The package's lazy public names and a command line that starts without the heavy stack."""

import subprocess
import sys

import pytest

import inhibkin as ik

# Libraries `inhibkin --help` has no use for (plotting, fitting, statistics, templating).
HEAVY = ("matplotlib", "seaborn", "lmfit", "statsmodels", "jinja2", "scipy", "pandas")


def _modules_after(code: str) -> set:
    """Top-level modules loaded by ``code`` in a fresh interpreter."""
    probe = (f"{code}\nimport sys\n"
             "print(' '.join(sorted({m.split('.')[0] for m in sys.modules})))")
    out = subprocess.run([sys.executable, "-c", probe], check=True, capture_output=True,
                         text=True).stdout
    return set(out.split())


def test_help_loads_no_heavy_library():
    code = ("import contextlib, io\nfrom inhibkin.cli import main\n"
            "for argv in (['--help'], ['report', '--help'], ['rank', '--help']):\n"
            "    try:\n"
            "        with contextlib.redirect_stdout(io.StringIO()):\n"
            "            main(argv)\n"
            "    except SystemExit:\n"
            "        pass")
    assert not _modules_after(code) & set(HEAVY)


def test_every_public_name_resolves_to_its_object():
    from inhibkin.potency.table import potency_table
    from inhibkin.reporting.report import report

    for name in ik.__all__:
        assert getattr(ik, name) is not None, name
    assert set(ik.__all__) <= set(dir(ik))
    # A submodule named like its function leaves the function as the package's name.
    assert ik.report is report and ik.potency_table is potency_table
    assert ik.figures.__name__ == "inhibkin.display.figures"


def test_unknown_names_raise_attribute_error():
    with pytest.raises(AttributeError, match="no_such_name"):
        ik.no_such_name  # noqa: B018
