"""The rooms import one way only (docs/architecture.md, "Which way imports go").

Parses every module's imports (ast, so nothing is run) and fails on an import that goes up or
sideways: a lower layer importing a higher one, or a command importing another command. The
layer tables below are the ones docs/architecture.md gives; a test checks the two agree.
"""
import ast
import re
import sys
from pathlib import Path

ROOT = Path(__file__).parent.parent

# rank of each room: a module may import its own room or any room of a LOWER rank
FIRMWARE_LAYERS = {"viper_stand": -1, "_host_micropython": 0, "codec": 0, "dsp": 0, "drivers": 0,
                   "detect": 1, "store": 1, "link": 2, "run": 3}
HOST_LAYERS = {"errors": 0, "progress": 0, "data": 1, "link": 2, "twin": 2, "fit": 3, "check": 3,
               "report": 4, "ops": 4, "fleet": 5, "commands": 6, "cli": 7}
LAYERS = {"firmware_py": FIRMWARE_LAYERS, "host_tools": HOST_LAYERS}
RANK = {"firmware_py": 0, "host_tools": 1}   # the host may import the device core, never the reverse


def _imports(path: Path):
    """(line, module) of every absolute import in the file, `from a.b import c` giving a.b.c too."""
    tree = ast.parse(path.read_text(), str(path))
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield node.lineno, a.name
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            yield node.lineno, node.module
            for a in node.names:
                yield node.lineno, f"{node.module}.{a.name}"


def _violations(package: str) -> list[str]:
    layers = LAYERS[package]
    bad = []
    for path in sorted((ROOT / package).rglob("*.py")):
        rel = path.relative_to(ROOT).with_suffix("").parts          # (package, room, module...)
        if len(rel) == 2 and rel[1] == "__init__":
            continue
        room = rel[1]
        assert room in layers, f"{path}: room {room!r} has no layer in docs/architecture.md"
        for line, mod in _imports(path):
            q = mod.split(".")
            if q[0] not in RANK:
                continue
            where = f"{path.relative_to(ROOT)}:{line} imports {mod}"
            if RANK[q[0]] > RANK[package]:
                bad.append(f"{where}: the device core imports host code")
                continue
            if q[0] != package or len(q) < 2:
                continue
            target = q[1]
            if target not in layers:
                continue                                            # a name from the package itself
            if layers[target] > layers[room] or (layers[target] == layers[room] and target != room):
                bad.append(f"{where}: {room} (layer {layers[room]}) may not import {target} (layer {layers[target]})")
            if package == "host_tools" and room == target == "commands" and len(q) > 2:
                if len(rel) < 3 or q[2] != rel[2]:
                    bad.append(f"{where}: a command imports another command")
    return bad


def test_firmware_imports_point_down():
    assert _violations("firmware_py") == []


def test_host_imports_point_down():
    assert _violations("host_tools") == []


def test_a_command_importing_a_command_is_caught(tmp_path, monkeypatch):
    # the check itself can fail: a fake tree with one sideways and one upward import
    fake = tmp_path / "host_tools"
    (fake / "commands").mkdir(parents=True)
    (fake / "data").mkdir()
    (fake / "commands" / "a.py").write_text("from host_tools.commands.b import x\n")
    (fake / "commands" / "b.py").write_text("x = 1\n")
    (fake / "data" / "c.py").write_text("from host_tools.twin import replay\n")
    monkeypatch.setattr(sys.modules[__name__], "ROOT", tmp_path)
    bad = _violations("host_tools")
    assert any("another command" in b for b in bad) and any("data (layer 1) may not import twin" in b for b in bad)


def test_architecture_doc_states_the_same_layers():
    text = (ROOT / "docs" / "architecture.md").read_text()
    for package, layers in LAYERS.items():
        for room, rank in layers.items():
            if room.startswith("_"):
                continue
            assert re.search(rf"\|\s*{rank}\s*\|\s*`{package}/{room}", text), f"{package}/{room} at layer {rank}"
