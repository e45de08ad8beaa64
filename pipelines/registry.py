"""Discovery of stage plugins through the ``relcorr.stages`` entry-point group.

relcorr's own stages register exactly as a third-party package would, in
``pyproject.toml``::

    [project.entry-points."relcorr.stages"]
    time_scales = "stages.time_scales:TimeScales"

The entry-point name must equal the class's ``name``.
"""
from __future__ import annotations

from importlib.metadata import entry_points

from stages.base import Stage

GROUP = "relcorr.stages"


class RegistryError(Exception):
    pass


def discover() -> dict[str, type[Stage]]:
    """All installed stages, by name.  Broken plugins raise RegistryError."""
    found: dict[str, type[Stage]] = {}
    for ep in sorted(entry_points(group=GROUP), key=lambda e: (e.name, e.value)):
        try:
            cls = ep.load()
        except Exception as exc:  # a broken third-party plugin must not look like our bug
            raise RegistryError(f"stage plugin {ep.name!r} ({ep.value}) failed to import: {exc}") from exc
        if not (isinstance(cls, type) and issubclass(cls, Stage)):
            raise RegistryError(f"stage plugin {ep.name!r} ({ep.value}) is not a relcorr Stage subclass")
        if cls.name != ep.name:
            raise RegistryError(f"stage plugin {ep.name!r} ({ep.value}) declares name {cls.name!r}")
        if not cls.references:
            raise RegistryError(f"stage plugin {ep.name!r} declares no published reference")
        if ep.name in found and found[ep.name] is not cls:
            raise RegistryError(f"two plugins register the stage name {ep.name!r}")
        found[ep.name] = cls
    return found
