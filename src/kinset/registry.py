"""The datasets kinset reads, one record each: the only place their names are listed.

The command line, the workflow plan, ``devices.csv``, the matcher and the report all
iterate over :data:`DATASETS`. Adding a dataset means one record here plus its own
modules (reader, physics, fit, extraction); see DEVELOPERS.md.

Records name their functions as ``"module:function"`` and import them only when called,
so that a job which only parses files does not pay for importing the fits.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import import_module
from typing import Callable


def load(target: str) -> Callable:
    """The function named ``"package.module:function"``."""
    module, _, name = target.partition(":")
    return getattr(import_module(module), name)


@dataclass(frozen=True)
class Dataset:
    """One dataset: its folder and table name, how it is read and extracted.

    ``side_tables`` are written beside ``<name>.csv`` by the same extraction, as
    ``<name>_<side>.csv`` (the forward readings, the capacitance points);
    ``settings_used`` are the reel.yaml keys its extraction reads (a rerun trigger);
    ``panel_columns`` the fitted columns the report draws for every part of the reel
    (column, title, unit); ``memory_per_mb`` the memory its extraction job declares per MB
    of the dataset's raw files, or of its largest bucket when ``one_bucket_at_a_time``
    (measured: :data:`kinset.workflow.PARSE_MEMORY_PER_MB`; 0 keeps the rule's floor).
    """

    name: str
    label: str
    short: str          # in generated file names (the demo writer's batch files: fwd_b0001.csv)
    reader: str
    extractor: str
    settings_used: tuple[str, ...]
    side_tables: tuple[str, ...] = ()
    panel_columns: tuple[tuple[str, str, str], ...] = ()
    memory_per_mb: float = 0.0
    one_bucket_at_a_time: bool = False

    @property
    def tables(self) -> tuple[str, ...]:
        """Stems of every table its extraction writes: ``<name>`` then the side tables."""
        return (self.name,) + tuple(f"{self.name}_{s}" for s in self.side_tables)

    def read(self, path):
        """One raw input file read into SI arrays (:mod:`kinset.io.datasets`)."""
        return load(self.reader)(path)

    def extract(self, reel, files):
        """Every device's fit (:mod:`kinset.extract`): an ``Extraction``."""
        return load(self.extractor)(reel, files)

    def quantities(self) -> list[str]:
        """The profile quantities evaluated from this dataset's tables."""
        from kinset.quantities import QUANTITIES
        return [name for name, q in QUANTITIES.items() if q.dataset == self.name]


DATASETS: tuple[Dataset, ...] = (
    Dataset("forward", "forward V–I", "fwd", "kinset.io.datasets:read_forward",
            "kinset.extract:extract_forward",
            ("reference_temperature_C", "ambient_temperature_C", "material", "eg_eV", "xti",
             "thermal_resistance_K_per_W", "self_heating", "accuracy"),
            side_tables=("readings",), memory_per_mb=14),
    Dataset("leakage", "reverse leakage", "leak", "kinset.io.datasets:read_leakage",
            "kinset.extract:extract_leakage",
            ("reference_temperature_C", "ambient_temperature_C", "material", "eg_eV", "xti",
             "accuracy", "leakage"), memory_per_mb=12),
    Dataset("capacitance", "junction capacitance", "cv", "kinset.io.datasets:read_capacitance",
            "kinset.extract:extract_capacitance",
            ("reference_temperature_C", "ambient_temperature_C", "accuracy", "capacitance"),
            side_tables=("points",),
            panel_columns=(("cj0_F", "zero-bias capacitance CJO", "F"),)),
    Dataset("recovery", "reverse recovery", "rr", "kinset.io.datasets:read_recovery",
            "kinset.extract:extract_recovery", ("recovery",), memory_per_mb=9,
            one_bucket_at_a_time=True),
)

NAMES: tuple[str, ...] = tuple(d.name for d in DATASETS)
BY_NAME: dict[str, Dataset] = {d.name: d for d in DATASETS}
# Every table an extraction writes, datasets in order, each followed by its side tables.
TABLES: tuple[str, ...] = tuple(t for d in DATASETS for t in d.tables)


def dataset(name: str) -> Dataset:
    return BY_NAME[name]
