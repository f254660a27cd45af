"""Where a command's MODEL argument comes from: a file of ours, an Open-PSA MEF file, or a demo name."""

from __future__ import annotations

from pathlib import Path

from troubleshoot.errors import ModelError, Problem
from troubleshoot.model import Model


def is_mef_file(path: Path) -> bool:
    """True when the file's root element is ``opsa-mef`` (read without resolving anything)."""
    from lxml import etree

    try:
        for _, element in etree.iterparse(str(path), events=("start",), resolve_entities=False,
                                          no_network=True, load_dtd=False):
            return element.tag == "opsa-mef"
    except (etree.XMLSyntaxError, OSError):
        return False  # the model loader reports the syntax error with its line
    return False


def model_path(spec: str) -> Path:
    """The path a MODEL argument stands for: an existing file wins over a demo of the same name.

    Not checked further: a path that does not exist is returned as given.
    """
    from troubleshoot.model.demos import DEMOS, demo_path

    path = Path(spec)
    if not path.exists() and spec in DEMOS:
        return demo_path(spec)
    return path


def resolve_model_path(spec: str) -> Path:
    """The file a MODEL argument names: an existing path, or a bundled demo's name."""
    from troubleshoot.model.demos import DEMOS

    path = model_path(spec)
    if not path.exists():
        raise ModelError([Problem(spec, None, "no such file; give the path of a model file or a demo name "
                                              f"({', '.join(sorted(DEMOS))})")])
    if not path.is_file():
        raise ModelError([Problem(str(path), None, "not a file; give the path of a model file")])
    return path


def load_any_model(spec: str) -> tuple[Model, list[Problem]]:
    """The Model named by ``spec`` (our XML, MEF, or a demo name) and the reader's warnings."""
    path = resolve_model_path(spec)
    if is_mef_file(path):
        from troubleshoot.model.mef.read import read_mef

        model, problems = read_mef(str(path))
        return model, [p for p in problems if p.severity != "error"]
    from troubleshoot.model.xmlfile import load_model

    return load_model(str(path)), []


def load_optional_model(spec: str | None) -> Model | None:
    """The Model a ``--model`` option names, or None when it is not given."""
    if not spec:
        return None
    model, _ = load_any_model(spec)
    return model
