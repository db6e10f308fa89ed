"""Every Python example in the README runs as written (the README is the first thing a user copies from)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

README = Path(__file__).resolve().parents[1] / "README.md"
BLOCKS = re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)


def test_the_readme_has_python_examples():
    assert BLOCKS, "the README lost its Python example"


@pytest.mark.parametrize("code", BLOCKS, ids=[f"block{k}" for k in range(len(BLOCKS))])
def test_readme_example_runs(code, capsys):
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # resolution and threshold advice is for users, not a failure here
        exec(compile(code, str(README), "exec"), {"__name__": "__readme__"})
    assert capsys.readouterr().out.strip(), "the example prints its result"
