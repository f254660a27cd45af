"""troubleshoot: fault trees turned into diagnostic Bayesian networks.

The functional core (``model``, ``engine``, ``advice``, ``analysis``) is pure;
the shell (``session``, ``study``, ``ui``, ``commands``) holds state, touches
files and talks to people.
"""

from troubleshoot.model import Model

#: The one place the version is written; pyproject.toml reads it from here.
__version__ = "0.2.0"


def load_model(path):
    """Load, validate and return the Model in an XML model file.

    Raises ModelError listing every problem (file:line and the fix) in one pass.
    """
    from troubleshoot.model.xmlfile import load_model as _load

    return _load(path)


def save_model(model, path):
    """Write a Model in the XML model format; load_model of it gives an equal Model."""
    from troubleshoot.model.xmlfile import save_model as _save

    return _save(model, path)


__all__ = ["Model", "load_model", "save_model", "__version__"]
