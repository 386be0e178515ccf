"""The committed notebooks are exactly what tools/make_notebooks.py writes (nothing is executed here)."""

import subprocess
import sys
from pathlib import Path

import nbformat
import pytest

ROOT = Path(__file__).resolve().parents[1]
TOOL = ROOT / "tools" / "make_notebooks.py"
COMMITTED = ROOT / "notebooks"


@pytest.fixture(scope="module")
def generated(tmp_path_factory):
    out = tmp_path_factory.mktemp("notebooks")
    subprocess.run([sys.executable, str(TOOL), str(out)], check=True, capture_output=True, cwd=ROOT)
    return out


def test_the_generator_writes_every_committed_notebook_and_no_other(generated):
    assert sorted(p.name for p in generated.glob("*.ipynb")) == sorted(p.name for p in COMMITTED.glob("*.ipynb"))


@pytest.mark.parametrize("name", sorted(p.name for p in COMMITTED.glob("*.ipynb")))
def test_committed_notebook_equals_the_generator_output_byte_for_byte(generated, name):
    made = (generated / name).read_bytes()
    assert made == (COMMITTED / name).read_bytes(), (
        f"notebooks/{name} differs from the generator's output; edit tools/make_notebooks.py and run "
        f"'.venv/bin/python tools/make_notebooks.py'"
    )


@pytest.mark.parametrize("name", sorted(p.name for p in COMMITTED.glob("*.ipynb")))
def test_committed_notebook_is_valid_format_4_5_with_unique_cell_ids(name):
    # Checked against nbformat's own JSON schema for notebook format 4.5 (cell ids: 1-64 characters of
    # [a-zA-Z0-9-_], unique within the notebook) -- nbformat package, schema nbformat.v4.5.schema.json.
    nb = nbformat.reads((COMMITTED / name).read_text(encoding="utf-8"), as_version=nbformat.NO_CONVERT)
    assert (nb.nbformat, nb.nbformat_minor) == (4, 5)
    nbformat.validate(nb)
    ids = [c.id for c in nb.cells]
    assert len(set(ids)) == len(ids)
