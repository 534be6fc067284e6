"""Loading a study for a survey: the study without observations and its ``[survey]``.

The keys of ``[survey]`` and their checks are in `inversion.study.survey_table`.
"""

from __future__ import annotations

import hashlib
from os import PathLike
from pathlib import Path

from ..errors import InputError
from ..study.file import Study
from ..study.keys import key_line, read_study_file
from ..study.survey_table import SPREAD, SurveySettings, parse_survey_table

__all__ = ["SPREAD", "SurveySettings", "load_survey_study", "parse_survey_table",
           "survey_study"]


def load_survey_study(path: str | PathLike[str]) -> tuple[Study, SurveySettings]:
    """Read a survey study file: the study (without observations) and its ``[survey]``.

    The study keeps the ``[survey]`` table (`Study.survey`), as `Study.from_file` does.

    Raises
    ------
    InputError
        As `Study.from_file` does (file, key, line), and for a bad ``[survey]`` key.
    """
    path = Path(path)
    raw, text, config = read_study_file(path)
    config["observations"] = []  # every site brings its own data
    try:
        study = Study.from_mapping(config, base_dir=path.parent, source=path,
                                   file_hash=hashlib.sha256(raw).hexdigest())
        settings = parse_survey_table(study.survey or {})
    except InputError as err:
        raise InputError(err.message, file=path, key=err.key,
                         line=err.line or key_line(text, err.key)) from None
    return study, settings


def survey_study(study: Study) -> tuple[Study, SurveySettings, str]:
    """A `Study` object for a survey: it without observations, its ``[survey]``
    settings (`Study.survey`; defaults when it has none) and the study's sha256.

    The sha256 (the resume fingerprint's "study file") is the file's when the study is
    the unchanged content of its source file, so the object and the file path give the
    same survey; otherwise a digest of the study's content.

    Raises
    ------
    InputError
        A bad ``[survey]`` key (naming the study's source file, if any).
    """
    try:
        settings = parse_survey_table(study.survey or {})
    except InputError as err:
        raise InputError(err.message, file=study.source, key=err.key) from None
    bare = study.with_observations(())
    if study.source is not None and study.file_hash is not None:
        try:
            fresh, _ = load_survey_study(study.source)
        except InputError:
            fresh = None  # the file went away or broke: the study stands on its own
        if fresh == bare:
            return fresh, settings, study.file_hash
    content = repr((bare.name, bare.model, sorted(bare.priors.items()),
                    sorted(bare.fixed.items()), bare.sampler, settings.record()))
    return bare, settings, "content-" + hashlib.sha256(content.encode()).hexdigest()
