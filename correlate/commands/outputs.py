"""What the commands share about their outputs: the input files an output may never touch."""

from __future__ import annotations

from pathlib import Path

from correlate.readers.study import Study


def study_inputs(study: Study) -> list[Path]:
    """Every file a study reads: the study itself, the model files, the gauge map and readings."""
    files = [study.path, study.model_file, study.gauges_file, study.readings_file]
    files += [c.file for c in study.cases]
    return [Path(f) for f in files if f is not None]
