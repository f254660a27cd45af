"""The package's layers: every import points down (DESIGN.md, "The layers").

Read from the import statements of every module (the ast, not the running
interpreter), so an import inside a function counts as much as one at the top.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "troubleshoot"

#: Rank of each room; a module may import only rooms of a lower or equal rank
#: (its own room included). Top-level modules are ranked by what they are.
RANK = {
    "errors": 0,
    "files": 0,
    "model": 1,
    "engine": 2,
    "advice": 3,
    "analysis": 3,
    "session": 4,
    "study": 5,
    "progress": 5,
    "ui": 6,
    "commands": 6,
    "cli": 7,
    "__main__": 8,
    "__init__": 8,
}
PURE = {"model", "engine", "advice", "analysis"}
#: Rooms of the same rank that still must not import each other.
SIBLINGS_APART = {("advice", "analysis"), ("analysis", "advice"), ("ui", "commands")}


def room_of(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def modules() -> list[tuple[str, Path]]:
    found = []
    for path in sorted(PACKAGE.rglob("*.py")):
        relative = path.relative_to(PACKAGE.parent).with_suffix("")
        name = ".".join(relative.parts)
        if name.endswith(".__init__"):
            name = name[: -len(".__init__")]
        found.append((name, path))
    return found


def imported_modules(path: Path, module: str) -> list[tuple[int, str]]:
    tree = ast.parse(path.read_text(), filename=str(path))
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(node.lineno, alias.name) for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            out.append((node.lineno, target))
    return [(line, name) for line, name in out if name == "troubleshoot" or name.startswith("troubleshoot.")]


def test_every_room_is_known():
    rooms = {room_of(name) for name, _ in modules() if name != "troubleshoot"}
    assert rooms <= set(RANK) | {"faulttrees"}, f"a new room needs a rank in this test: {rooms - set(RANK)}"


@pytest.mark.parametrize(("module", "path"), modules(), ids=[name for name, _ in modules()])
def test_no_import_points_up(module, path):
    if module == "troubleshoot":
        return  # the package's front door re-exports the model and its loader
    room = room_of(module)
    wrong = []
    for line, target in imported_modules(path, module):
        if target == "troubleshoot":
            if room in PURE:
                wrong.append(f"{path.name}:{line} imports the package root")
            continue
        other = room_of(target)
        if RANK.get(other, 99) > RANK[room] or (room, other) in SIBLINGS_APART:
            wrong.append(f"{path.relative_to(PACKAGE.parent)}:{line}: {room}/ imports {target}")
    assert not wrong, "imports pointing up the layers:\n" + "\n".join(wrong)


def test_a_planted_upward_import_is_caught(tmp_path):
    planted = tmp_path / "planted.py"
    planted.write_text("from troubleshoot.session import Session\n")
    targets = imported_modules(planted, "troubleshoot.engine.planted")
    assert targets == [(1, "troubleshoot.session")]
    assert RANK[room_of(targets[0][1])] > RANK["engine"]
