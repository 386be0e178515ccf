import json
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples"


@pytest.fixture
def type3_dict():
    return json.loads((EXAMPLES / "bus48_type3.json").read_text(encoding="utf-8"))
