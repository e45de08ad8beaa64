"""The stage contract: what every relcorr stage plugin declares and does.

A stage is a class with declarations (read before anything runs, so a whole
pipeline can be checked from its TOML file) and one pure method, ``apply``,
that turns a batch of records into new columns.  ``apply`` does no file I/O,
keeps no state between calls and works on whole columns (numpy / erfa /
pyarrow compute); the pipeline feeds it one Parquet row group at a time, so
its results must not depend on where a batch starts or ends.

See DEVELOPERS.md, "Writing a stage plugin", for a worked example.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, ClassVar, Mapping

import numpy as np
import pyarrow as pa

__all__ = ["Column", "Param", "Reference", "StageContext", "StageResult", "Stage"]


@dataclass(frozen=True)
class Column:
    """A column a stage reads or adds: Arrow type, unit and meaning."""

    name: str
    type: pa.DataType
    unit: str
    description: str

    def field(self) -> pa.Field:
        """The Arrow field, with unit and description in its metadata."""
        return pa.field(
            self.name,
            self.type,
            metadata={b"unit": self.unit.encode(), b"description": self.description.encode()},
        )


_PARAM_KINDS = {"float": (float, int), "int": (int,), "str": (str,), "bool": (bool,)}


@dataclass(frozen=True)
class Param:
    """A stage parameter as it may be set in the TOML file."""

    name: str
    kind: str  # "float", "int", "str" or "bool"
    default: Any
    help: str
    unit: str = ""
    minimum: float | None = None
    maximum: float | None = None
    choices: tuple = ()

    def __post_init__(self) -> None:
        if self.kind not in _PARAM_KINDS:
            raise ValueError(f"Param {self.name}: kind must be one of {sorted(_PARAM_KINDS)}")

    def expected(self) -> str:
        """Human description of an acceptable value, used in config errors."""
        text = {"float": "a number", "int": "an integer", "str": "a string", "bool": "true or false"}[self.kind]
        if self.choices:
            text = "one of " + ", ".join(repr(c) for c in self.choices)
        if self.minimum is not None and self.maximum is not None:
            text += f" in [{self.minimum}, {self.maximum}]"
        elif self.minimum is not None:
            text += f" >= {self.minimum}"
        elif self.maximum is not None:
            text += f" <= {self.maximum}"
        if self.unit:
            text += f" ({self.unit})"
        return text

    def check(self, value: Any) -> str | None:
        """Return None when ``value`` is acceptable, else what is wrong with it."""
        kinds = _PARAM_KINDS[self.kind]
        # bool is an int in Python: refuse it where a number is expected.
        if isinstance(value, bool) and self.kind != "bool":
            return f"expected {self.expected()}"
        if not isinstance(value, kinds):
            return f"expected {self.expected()}"
        if self.kind == "float" and not np.isfinite(value):
            return f"expected {self.expected()}"
        if self.choices and value not in self.choices:
            return f"expected {self.expected()}"
        if self.minimum is not None and value < self.minimum:
            return f"expected {self.expected()}"
        if self.maximum is not None and value > self.maximum:
            return f"expected {self.expected()}"
        return None

    def normalise(self, value: Any) -> Any:
        return float(value) if self.kind == "float" else value


@dataclass(frozen=True)
class Reference:
    """A published source a stage implements: citation and what is taken from it."""

    citation: str
    used_for: str


@dataclass(frozen=True)
class StageContext:
    """Read-only facts a stage may use besides its own parameters.

    ``models`` holds the shared model choices of the run (the ``[models]``
    table of the config, resolved); ``record_kind`` is "tracking", "clock" or "orientation";
    ``columns`` lets a stage decide, before it runs, whether optional inputs
    will be there (e.g. a station position).
    """

    record_kind: str
    models: Mapping[str, Any]
    partition: str = ""
    #: names of the columns the stage will receive (known before anything runs)
    columns: frozenset = frozenset()
    #: what the stage's ``prepare`` computed over the whole partition (None without one)
    state: Any = None
    #: folder that relative paths in stage parameters are taken from: the config file's
    #: folder (``--base-dir`` moves the data folders only, not the model files)
    base_dir: str = "."
    #: (first, last) UTC day (MJD) of the partition's records, when known: ``model_identities``
    #: may then identify only the part of a model table those records can use
    span_mjd: tuple[int, int] | None = None

    def path(self, value: str) -> "Path":
        """A path parameter resolved against ``base_dir``."""
        p = Path(value)
        return p if p.is_absolute() else Path(self.base_dir) / p


@dataclass
class StageResult:
    """What ``Stage.apply`` returns for one batch.

    columns     new columns, one entry per declared provided column, each a
                numpy array or Arrow array of the batch's length;
    touched     boolean mask of the records this stage changed or annotated
                (None: all of them); recorded in the per-record ledger;
    quarantine  reason code -> boolean mask of records the stage cannot
                process (they leave the main stream for the quarantine file
                with that reason; the first matching reason wins).
    """

    columns: dict[str, Any]
    touched: np.ndarray | None = None
    quarantine: dict[str, np.ndarray] = field(default_factory=dict)


class Stage:
    """Base class of all stages.  Subclasses fill the class attributes."""

    #: stable name used in TOML files, ledgers and manifests
    name: ClassVar[str] = ""
    #: algorithm version: bump whenever the numbers a stage produces can change
    version: ClassVar[int] = 1
    #: one line on what the stage does
    summary: ClassVar[str] = ""
    #: record kinds the stage accepts
    record_kinds: ClassVar[tuple[str, ...]] = ("tracking", "clock")
    #: columns that must be present (from ingest or an earlier stage)
    requires: ClassVar[tuple[Column, ...]] = ()
    #: columns used when present (never required)
    optional: ClassVar[tuple[Column, ...]] = ()
    #: columns the stage adds
    provides: ClassVar[tuple[Column, ...]] = ()
    #: parameters settable in TOML
    params: ClassVar[tuple[Param, ...]] = ()
    #: published sources the stage implements (a stage without one is a bug)
    references: ClassVar[tuple[Reference, ...]] = ()
    #: provided columns holding per-record status flags; the manifest counts their values
    flag_columns: ClassVar[tuple[str, ...]] = ()
    #: reason codes the stage may quarantine with, and their meaning
    quarantine_reasons: ClassVar[Mapping[str, str]] = {}

    #: columns the stage needs from the whole partition before its batches run (see ``prepare``)
    partition_columns: ClassVar[tuple[str, ...]] = ()

    def prepare(self, columns: pa.Table, params: Mapping[str, Any], context: StageContext) -> Any:
        """A pass over the whole partition, for what a batch alone cannot tell (steps in a clock
        series, epochs out of order).  ``columns`` holds only ``partition_columns`` (the pipeline
        reads them with projection, so memory is a few bytes per record).  The return value
        reaches ``apply`` as ``context.state``; if it has a ``summary`` attribute (a dict of plain
        values), the run's manifest records it with the stage's activity."""
        return None

    def validate(self, params: Mapping[str, Any], context: StageContext) -> dict[str, str]:
        """Problems with the resolved parameters that a type check cannot see
        (a catalogue file that is missing or malformed...), as parameter name ->
        message.  Called before anything runs; reported as config errors."""
        return {}

    def model_identities(self, params: Mapping[str, Any], context: StageContext) -> dict[str, Any]:
        """Identities (versions, hashes) of the model data the stage reads.

        They enter the stage's fingerprint, so that a new Earth-orientation
        table or ephemeris makes the stage run again.
        """
        return {}

    def apply(self, table: pa.Table, params: Mapping[str, Any], context: StageContext) -> StageResult:
        raise NotImplementedError

    # -- helpers for the pipeline ------------------------------------------
    @classmethod
    def defaults(cls) -> dict[str, Any]:
        return {p.name: p.default for p in cls.params}

    @classmethod
    def tag(cls) -> str:
        """The ledger entry of this stage: ``name@version``."""
        return f"{cls.name}@{cls.version}"
