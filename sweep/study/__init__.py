"""The study file and what follows from it alone: settings, checks, search-space forms, arrays, scores.

A study file (TOML) becomes a frozen `StudySpec` (`reader`), every mistake named with its key
(`checks`); the searchable settings take the forms of `space`; `inputs` turns the spec and a
price file into the arrays, windows and scorer a study trains on; `scores` and `baselines` score
forecasts on those windows; `summaries` are the reports of `volsweep data`, `baselines`, `features`.
`demo` (imported on its own: it brings the invented market's generator) writes the demo study.
"""

from sweep.errors import SpecError
from sweep.study.baselines import BaselineScore, compute_baselines
from sweep.study.edits import set_keys
from sweep.study.inputs import (
    MIN_WINDOW_ROWS, SCORED_WINDOWS, WINDOW_NAMES, StudyInputs, WindowRows, WindowSpan, build_study_dataset,
    feature_config, load_study_prices, min_rows, prepare_folds, prepare_inputs, split_windows, valid_dates,
    valid_labels, valid_truth, window_rows,
)
from sweep.study.reader import diff_specs, load_spec, parse_spec, spec_from_text
from sweep.study.scores import FORECAST_FLOOR, fold_mean, mean_dicts, score_forecasts, window_losses
from sweep.study.space import (
    ACTIVATIONS, SETTINGS, Choice, Fixed, FloatRange, FrozenMap, IntRange, Setting, SettingRule, format_value,
    grid_values, parse_space, suggest_params,
)
from sweep.study.spec import (
    HAR_MIN_ROWS, OBJECTIVES, PRUNERS, SAMPLERS, SECTIONS, BaselineSection, DataSection, FeatureSection,
    SearchSection, SplitSection, StudySection, StudySpec, TargetSection, TrainingSection,
)
from sweep.study.summaries import (
    BaselineRow, BaselinesReport, DataReport, EstimatorStats, baselines_report, data_report, features_frame,
)

__all__ = [
    "ACTIVATIONS", "FORECAST_FLOOR", "HAR_MIN_ROWS", "MIN_WINDOW_ROWS", "OBJECTIVES", "PRUNERS", "SAMPLERS",
    "SCORED_WINDOWS", "SECTIONS", "SETTINGS", "WINDOW_NAMES", "BaselineRow", "BaselineScore", "BaselineSection",
    "BaselinesReport", "DataReport", "EstimatorStats", "WindowSpan", "Choice", "DataSection", "FeatureSection",
    "Fixed", "FloatRange", "FrozenMap", "IntRange", "SearchSection", "Setting", "SettingRule", "SpecError",
    "SplitSection", "StudyInputs", "StudySection", "StudySpec", "TargetSection", "TrainingSection",
    "WindowRows", "baselines_report", "build_study_dataset", "compute_baselines", "data_report", "diff_specs",
    "feature_config", "features_frame", "fold_mean", "format_value", "grid_values", "load_spec",
    "load_study_prices", "mean_dicts", "min_rows", "parse_space", "parse_spec", "prepare_folds",
    "prepare_inputs", "score_forecasts", "set_keys", "spec_from_text", "split_windows", "suggest_params",
    "valid_dates", "valid_labels", "valid_truth", "window_losses", "window_rows",
]
