"""Where the bundled data folders are: installed as ``wallstress.<name>`` subpackages, or, when the
package is imported from a source checkout (``python -m pytest`` puts the checkout first on the
path), the top-level folders of that checkout."""

from __future__ import annotations

from importlib import resources
from pathlib import Path


def data_dir(name: str) -> Path:
    """The folder of a bundled data subpackage (``reference_tables`` or ``sample_studies``)."""
    try:
        return Path(str(resources.files(f"wallstress.{name}")))
    except ModuleNotFoundError:
        folder = Path(__file__).resolve().parent.parent / name
        if folder.is_dir():
            return folder
        raise
