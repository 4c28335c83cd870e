"""What the commands share about their outputs: the input files an output may never touch."""

from __future__ import annotations

from pathlib import Path

from correlate.readers.study import Study


def study_inputs(study: Study) -> list[Path]:
    """Every file a study reads: the study itself, the model files (coarser meshes and input
    variants too), the gauge map and readings."""
    files = [study.path, study.model_file, study.gauges_file, study.readings_file]
    files += [c.file for c in study.cases]
    if study.uncertainty is not None:
        files += [i.variant for i in study.uncertainty.inputs]
    if study.numerical is not None:
        files += [m.file for m in study.numerical.meshes]
    if study.fullfield is not None:
        files += study.fullfield.inputs
    return [Path(f) for f in files if f is not None]
