"""Getting started after `make demo`: the README says how to reach `edgevib`, and the make target
that forwards arguments runs the venv's command with them (GNU make's dry run, -n, shows it)."""
import shutil
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent


def test_readme_tells_how_to_run_edgevib_after_make_demo():
    text = (REPO / "README.md").read_text()
    assert ". .venv/bin/activate" in text and 'make edgevib ARGS="' in text


@pytest.mark.skipif(shutil.which("make") is None, reason="needs GNU make")
def test_make_target_forwards_the_arguments():
    out = subprocess.run(["make", "-n", "-W", ".venv/.installed-stamp", "edgevib", "ARGS=replay a.wav --params p.msgpack"],
                         cwd=REPO, capture_output=True, text=True, check=True).stdout
    assert ".venv/bin/edgevib replay a.wav --params p.msgpack" in out
