"""The bundled demo models (illustrative scenarios of our own invention).

They live in the repository's ``faulttrees/`` folder and install as the
package ``troubleshoot.faulttrees``, so a non-editable install finds them.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

#: Short name -> file name in faulttrees/.
DEMOS = {
    "rooftop": "rooftop_ac.xml",
    "booster": "booster_pumps.xml",
}
#: The demo opened when ``troubleshoot`` runs with no arguments.
DEFAULT_DEMO = "rooftop"


def demo_path(name: str = DEFAULT_DEMO) -> Path:
    """Path of a bundled demo model file, installed or in a source checkout."""
    file_name = DEMOS[name]
    try:
        candidate = Path(str(resources.files("troubleshoot.faulttrees") / file_name))
        if candidate.is_file():
            return candidate
    except ModuleNotFoundError:
        pass
    # Running from a source checkout without installing: faulttrees/ beside the package.
    return Path(__file__).resolve().parents[2] / "faulttrees" / file_name
