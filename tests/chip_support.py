"""Shared set-up for the driver tests: the chip models import as `chipmodels` here and in the
MicroPython guests (where they are staged beside firmware_py)."""
import shutil
import sys
from pathlib import Path

HERE = Path(__file__).parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))


def stage_models_in_guest():
    """Copy tests/chipmodels into both MicroPythons' staging folders (once per process)."""
    from host_tools.twin import mpy_guest, mpy_unix
    for root in (mpy_guest._stage(), mpy_unix.stage(True)):
        dst = root / "chipmodels"
        if not dst.exists():
            shutil.copytree(HERE / "chipmodels", dst, ignore=shutil.ignore_patterns("__pycache__"))
