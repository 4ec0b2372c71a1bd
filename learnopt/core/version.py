"""The package version (one place: the face, the command line and model files read it)."""
from importlib import metadata

__version__ = "0.1.0"


def package_versions(packages: dict[str, str]) -> dict:
    """{label: installed version of its distribution, or None}, for model files' evidence."""
    out = {}
    for label, dist in packages.items():
        try:
            out[label] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[label] = None
    return out
