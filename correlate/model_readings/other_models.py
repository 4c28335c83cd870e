"""Other models of the same study: coarser meshes and input variants, each opened on its own.

Stage: model readings. In: a :class:`~correlate.readers.study.Study`, the gauge map already read
for it and the path of another result file (a coarser mesh of ``[numerical]``, or a variant of
``[[uncertainty.input]]``). Out: a :class:`~correlate.model_readings.model.Model` of that file
with every gauge located on it by the study's own rules. The meshes need not share nodes with
the study's model. Callers evaluate one such model, keep only its readings and drop it before
opening the next, so two large meshes are never held together.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pandas as pd

from correlate.core import progress
from correlate.model_readings.model import Model, locate, open_sources, settle_family
from correlate.readers.study import Study


def variant_study(study: Study, file: Path) -> Study:
    """The study with ``file`` as its model file for every case (cases keep no file of their own;
    the reader refuses case files beside coarser meshes and variants)."""
    return replace(study, model_file=Path(file),
                   cases=tuple(replace(c, file=None) for c in study.cases))


def open_variant(study: Study, file: Path, gauges: pd.DataFrame) -> Model:
    """Open ``file`` and locate the study's gauges on it, as :func:`prepare` does for the study.

    The convention checks are not repeated: they were made (and warned about) on the study's own
    model, and the same arrays on another mesh would repeat each line.
    """
    other = variant_study(study, file)
    with progress.step(f"reading {Path(file).name}"):
        sources = open_sources(other)
    settle_family(other, sources, gauges)
    return locate(other, sources, gauges)


__all__ = ["open_variant", "variant_study"]
