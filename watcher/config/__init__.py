"""The lab's config: typed records (``model``) and the loader that builds them from YAML (``load``).

Every stage reads its settings from these frozen records; only ``load`` touches the file. Inside
this package the modules import ``watcher.config.model`` directly, never this ``__init__``, so
that there is no import cycle (model <- values <- checks <- sections <- load).
"""

from watcher.config.load import load, load_config, load_config_text, load_default
from watcher.config.model import (
    REGEX_PREFIX,
    WESTGARD_RULES,
    Alerts,
    BaselineSpec,
    Central,
    Channel,
    Check,
    Condition,
    Config,
    Convert,
    CusumSpec,
    EwmaSpec,
    ExpectedIon,
    ForecastSpec,
    HealthLog,
    Instrument,
    IonSpec,
    Limits,
    SignalSettings,
    Watch,
    is_yes_no_metric,
    known_metric_paths,
    matches_applies_to,
    metric_fields,
    metric_path_problem,
    state_dir_of,
)

__all__ = [
    "REGEX_PREFIX",
    "WESTGARD_RULES",
    "Alerts",
    "BaselineSpec",
    "Central",
    "Channel",
    "Check",
    "Condition",
    "Config",
    "Convert",
    "CusumSpec",
    "EwmaSpec",
    "ExpectedIon",
    "ForecastSpec",
    "HealthLog",
    "Instrument",
    "IonSpec",
    "Limits",
    "SignalSettings",
    "Watch",
    "is_yes_no_metric",
    "known_metric_paths",
    "load",
    "load_config",
    "load_config_text",
    "load_default",
    "matches_applies_to",
    "metric_fields",
    "metric_path_problem",
    "state_dir_of",
]
