"""The config loader: YAML scalars, lines, ${ENV} and secrets, durations, paths, metric names."""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from pathlib import Path

import pytest
import yaml
from hypothesis import given, settings
from hypothesis import strategies as st

from watcher import config as cfg
from watcher.config.keys import KEYS
from watcher.config.load import load_config, load_config_text
from watcher.config.model import Range
from watcher.config.values import Values
from watcher.config.yamllines import MAX_NODES, format_path, read_yaml, resolve_plain
from watcher.errors import ConfigError, ConfigProblem
from watcher.records import CalibrantDrift, ExpectedIonResult, Severity, SignalMetrics

# -- applies_to: which runs a check is evaluated on ------------------------------------------


@pytest.mark.parametrize(
    ("applies_to", "file_name", "expected"),
    [
        ((), "S01_liver.mzML", True),  # empty = every run
        (("QC_*.mzML",), "QC_0412.mzML", True),
        (("QC_*.mzML",), "S01_QC.mzML", False),
        (("QC_*.mzML",), "qc_0412.mzml", False),  # case-sensitive on every platform
        (("QC_*.mzML", "S*_*.mzML"), "S07_plasma.mzML", True),  # any pattern matches
        (("re:QC_\\d{4}\\.mzML",), "QC_0412.mzML", True),
        (("re:QC_\\d{4}\\.mzML",), "QC_0412.mzML.gz", False),  # regex must match the whole name
        (("re:S\\d+_.*",), "S12_urine.mzXML", True),
    ],
)
def test_applies_to_glob_and_regex(
    applies_to: tuple[str, ...], file_name: str, expected: bool
) -> None:
    """applies_to selects runs by glob (fnmatchcase) or re:<regex> (fullmatch) on the file name."""
    assert cfg.matches_applies_to(applies_to, file_name) is expected
    check = cfg.Check(name="c", metric="signal.tic_median", applies_to=applies_to)
    assert check.applies_to_file(file_name) is expected


def test_applies_to_bad_regex_in_code_is_a_config_error() -> None:
    """A check built in code with a broken re: pattern raises ConfigError, not re.error."""
    with pytest.raises(ConfigError, match="invalid regex"):
        cfg.matches_applies_to(("re:QC_(",), "QC_1.mzML")


@pytest.mark.parametrize(
    "pattern",
    [
        "(a+)+$",  # nested quantifier: the textbook exponential case (OWASP, "ReDoS")
        "(a*)*b",
        "([a-z]+_)*x",
        "(\\d{2,4})+",  # a variable bounded repeat inside a repeat
        "(a|ab)+$",  # alternation whose branches start alike
        "(x|)*y",  # an empty branch under a repeat
    ],
)
def test_backtracking_regex_in_code_is_a_config_error(pattern: str) -> None:
    """A check built in code with an exponential-time regex is refused before it is matched."""
    with pytest.raises(ConfigError, match="exponential time"):
        cfg.matches_applies_to((f"re:{pattern}",), "a" * 40 + "!")


@pytest.mark.parametrize(
    "pattern",
    ["QC_\\d+\\.mzML", "(QC|Blank)_.*\\.mzML", "(a|b)+", "(\\d{2})+", "(?:a++)+", "(?>a+)+"],
)
def test_plain_regexes_are_accepted(pattern: str) -> None:
    """Fixed repeats, disjoint alternatives, possessive and atomic groups cannot blow up."""
    cfg.matches_applies_to((f"re:{pattern}",), "QC_12.mzML")


def test_regex_is_not_matched_against_a_name_longer_than_a_file_name() -> None:
    """Names over 255 characters (NAME_MAX) are never given to the regex matcher; globs still
    apply to them."""
    long_name = "QC_" + "1" * 300 + ".mzML"
    assert not cfg.matches_applies_to(("re:QC_\\d+\\.mzML",), long_name)
    assert cfg.matches_applies_to(("QC_*.mzML",), long_name)
    assert cfg.matches_applies_to(("re:QC_\\d+\\.mzML",), "QC_" + "1" * 240 + ".mzML")


# -- YAML scalars ------------------------------------------------------------------------------

# YAML 1.2.2 core schema, section 10.3.2 (tag resolution): ints, floats with or without a dot or
# an exponent sign, and only true/false as booleans; YAML 1.1 extras such as yes/no, sexagesimal
# 18:00 and dates stay text.
SCALARS = [
    ("1e5", 1e5),
    ("1.0e5", 1e5),
    ("2.5E+6", 2.5e6),
    ("-3", -3),
    ("+7", 7),
    ("010", 10),
    ("0x1F", 31),
    ("0.25", 0.25),
    (".5", 0.5),
    ("-1.5e-3", -1.5e-3),
    ("true", True),
    ("False", False),
    ("null", None),
    ("~", None),
    ("yes", "yes"),
    ("18:00", "18:00"),
    ("2026-12-01", "2026-12-01"),
    ("10x", "10x"),
    ("1-3s", "1-3s"),
    ("R-4s", "R-4s"),
]


@pytest.mark.parametrize(("text", "expected"), SCALARS)
def test_plain_scalars_resolve_as_written(text: str, expected: object) -> None:
    """A plain scalar in a mapping reads as the YAML 1.2 core type of its text."""
    data, _lines, problems = read_yaml(f"x: {text}\n", source="t.yaml")
    assert problems == []
    assert data["x"] == expected
    assert type(data["x"]) is type(expected)
    assert resolve_plain(text) == expected


def test_lines_recorded_for_keys_and_items() -> None:
    """Every mapping key and sequence item gets the 1-based line where it starts."""
    text = "a:\n  b: 1\n  c:\n    - x\n    - {d: 2}\n"
    _data, lines, _problems = read_yaml(text, source="t.yaml")
    assert lines[("a",)] == 1
    assert lines[("a", "b")] == 2
    assert lines[("a", "c", 0)] == 4
    assert lines[("a", "c", 1)] == 5
    assert lines[("a", "c", 1, "d")] == 5


def test_format_path() -> None:
    """Key paths print as dotted names with [index] for list items."""
    assert format_path(("checks", 2, "critical", "outside")) == "checks[2].critical.outside"
    assert format_path(()) == ""


def test_check_line_is_the_yaml_line() -> None:
    """Check.line is the line where the check's list item starts."""
    text = "\n\nchecks:\n  - name: tic\n    metric: signal.tic_median\n    warning: {below: 1}\n"
    config = load_config_text(text, source="lab.yaml")
    assert config.checks[0].line == 4


# -- hostile YAML ------------------------------------------------------------------------------


def test_python_tags_are_refused() -> None:
    """An object-constructing tag is refused, not run."""
    text = "a: !!python/object/apply:os.system ['touch /tmp/ionwarden-pwned']\n"
    with pytest.raises(ConfigError, match="refused: YAML tag"):
        load_config_text(text, source="lab.yaml")


def _alias_bomb(levels: int, fan_out: int) -> str:
    lines = [f"l0: &l0 [{', '.join(['lol'] * fan_out)}]"]
    for i in range(1, levels):
        lines.append(f"l{i}: &l{i} [{', '.join([f'*l{i - 1}'] * fan_out)}]")
    return "\n".join(lines) + "\n"


@pytest.mark.timeout(60)  # a hang guard (speed is measured in bench/)
def test_small_alias_bomb_is_refused_by_its_count() -> None:
    """A 1 kB "billion laughs" file (10^9 values) is refused by counting, not expanding."""
    text = _alias_bomb(9, 10)
    assert len(text) < 2000
    with pytest.raises(ConfigError, match=f"more than {MAX_NODES} values"):
        load_config_text(text, source="lab.yaml")


@pytest.mark.timeout(60)  # a hang guard (speed is measured in bench/)
def test_ten_megabyte_alias_bomb_is_refused_by_size(tmp_path: Path) -> None:
    """A 10 MB file of anchors and aliases is refused by its size before it is parsed."""
    path = tmp_path / "bomb.yaml"
    block = _alias_bomb(9, 10)
    with path.open("w") as fh:
        fh.write(block)
        i = 0
        while fh.tell() < 10 * 1024 * 1024:
            fh.write(f"pad{i}: [{', '.join(['*l8'] * 200)}]\n")
            i += 1
    with pytest.raises(ConfigError, match="too large for a config"):
        load_config(path)


def test_recursive_alias_is_refused() -> None:
    """A list that contains itself is refused instead of looping."""
    with pytest.raises(ConfigError, match="refers to itself"):
        load_config_text("watch:\n  folders: &a [x, *a]\n", source="lab.yaml")


# -- ${ENV} and secrets ------------------------------------------------------------------------


def test_env_expansion_with_and_without_default() -> None:
    """${NAME} takes the variable, ${NAME:-text} falls back, $${ stays literal."""
    text = "instrument: {name: '${LAB}-${BENCH:-2} $${KEEP}'}\nwatch: {settle_s: '${SETTLE:-20}'}\n"
    config = load_config_text(text, source="lab.yaml", environ={"LAB": "Larkfield"})
    assert config.instrument.name == "Larkfield-2 ${KEEP}"
    assert config.watch.settle_s == 20.0  # a whole "${...}" value reads as a plain scalar


def test_unset_env_names_key_and_line() -> None:
    """An unset variable without default is an error at its key and line."""
    text = "instrument:\n  name: ${IONWARDEN_NOPE}\n"
    with pytest.raises(ConfigError) as caught:
        load_config_text(text, source="lab.yaml", environ={})
    assert str(caught.value).startswith("lab.yaml:2: instrument.name: ${IONWARDEN_NOPE} is not set")


def test_secrets_file_supplies_names(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Names in a private secrets_file fill ${NAME}, ahead of the environment."""
    secrets = tmp_path / "secrets.yaml"
    secrets.write_text("CHAT_URL: json://127.0.0.1:8025/secret\n")
    secrets.chmod(0o600)
    lab = tmp_path / "lab.yaml"
    lab.write_text(
        "secrets_file: secrets.yaml\nalerts:\n  channels:\n    - {name: chat, url: '${CHAT_URL}'}\n"
    )
    monkeypatch.setenv("CHAT_URL", "json://127.0.0.1:9/from-env")
    config = load_config(lab)
    assert config.alerts.channels[0].url == "json://127.0.0.1:8025/secret"


def test_readable_secrets_file_is_refused(tmp_path: Path) -> None:
    """A secrets_file that group or others can read is refused, naming the chmod fix."""
    secrets = tmp_path / "secrets.yaml"
    secrets.write_text("CHAT_URL: json://127.0.0.1:8025/secret\n")
    secrets.chmod(0o644)
    lab = tmp_path / "lab.yaml"
    lab.write_text("secrets_file: secrets.yaml\n")
    with pytest.raises(ConfigError) as caught:
        load_config(lab)
    message = str(caught.value)
    assert message.startswith(f"{lab}:1: secrets_file: refused:")
    assert "mode 0644" in message
    assert "chmod 600" in message


# -- durations, times, paths -------------------------------------------------------------------

# common practice: 1 min = 60 s, 1 h = 3600 s, 1 d = 86400 s
DURATIONS = [
    ("20", 20.0),
    ("2.5", 2.5),
    ("20s", 20.0),
    ("30min", 1800.0),
    ("4h", 14400.0),
    ("2d", 172800.0),
    ("1h30min", 5400.0),
    ("1.5h", 5400.0),
]


@pytest.mark.parametrize(("text", "seconds"), DURATIONS)
def test_durations_in_seconds(text: str, seconds: float) -> None:
    """Durations written as seconds or with a unit become seconds."""
    config = load_config_text(f"alerts: {{remind_every: {text}}}\n", source="lab.yaml")
    assert config.alerts.remind_every_s == seconds


def test_never_turns_reminders_off() -> None:
    """remind_every: never (or null) means no reminders."""
    for text in ("never", "null"):
        config = load_config_text(f"alerts: {{remind_every: {text}}}\n", source="lab.yaml")
        assert config.alerts.remind_every_s is None


def test_times_of_day_and_active_hours() -> None:
    """HH:MM times are kept zero-padded; active_hours is a (start, end) pair."""
    text = "digest_at: '7:30'\nalerts: {active_hours: ['18:00', '08:00']}\n"
    config = load_config_text(text, source="lab.yaml")
    assert config.digest_at == dt.time(7, 30)
    assert config.alerts.active_hours == (dt.time(18, 0), dt.time(8, 0))


def test_relative_paths_resolve_against_config_folder(tmp_path: Path) -> None:
    """Watch folders, state_dir and health_log.dir are relative to the config file's folder."""
    lab = tmp_path / "conf" / "lab.yaml"
    lab.parent.mkdir()
    lab.write_text(
        "watch: {folders: [exports, /abs/drop]}\nstate_dir: ../state\nhealth_log: {dir: logs}\n"
    )
    config = load_config(lab)
    assert config.watch.folders == (lab.parent / "exports", Path("/abs/drop"))
    assert config.state_dir == lab.parent / "../state"
    assert config.health_log.dir == lab.parent / "logs"
    assert config.source == lab


def test_missing_file_is_one_line_error(tmp_path: Path) -> None:
    """A config that does not exist gives one line naming it, no traceback."""
    path = tmp_path / "nope.yaml"
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    assert str(caught.value) == f"{path}: cannot read: No such file or directory"


def test_empty_file_gives_defaults() -> None:
    """An empty config is valid and gives the built-in defaults."""
    config = load_config_text("", source="lab.yaml")
    assert config == cfg.Config(source=Path("lab.yaml"))


# -- the embedded default ----------------------------------------------------------------------


def test_default_config_is_the_demo_scenario() -> None:
    """load_default() holds the Larkfield demo: two calibrants, three ions, QC-only ion checks."""
    config = cfg.load_default()
    assert config.source is None
    assert config.state_dir is None
    assert config.instrument.name == "Kestrel-2 Q-TOF"
    assert config.instrument.timezone == "Europe/Oslo"
    assert config.watch.settle_s == 2.0
    assert [c.name for c in config.calibrants] == ["siloxane-445", "leu-enk"]
    assert config.calibrants[0].mz == 445.120025  # check-ions.tsv (molmass): 445.12002454
    assert [e.ion.name for e in config.expected_ions] == ["caffeine", "mrfa", "reserpine"]
    by_name = {c.name: c for c in config.checks}
    assert by_name["expected ions"].applies_to == ("QC_*",)
    assert by_name["expected ions"].critical == cfg.Condition(is_=False)
    assert by_name["signal collapse"].critical == cfg.Condition(below_ratio=0.3)
    assert by_name["siloxane QC rules"].westgard == ("1-3s", "2-2s", "R-4s", "10x")
    assert by_name["siloxane QC rules"].baseline.sd == 1.0
    assert config.alerts.remind_every_s == 4 * 3600
    assert config.alerts.expect_run_every_s == 3 * 3600
    assert config.health_log.keep_days == 90


def test_demo_yaml_equals_default() -> None:
    """config/demo.yaml is the same text as the embedded default."""
    root = Path(__file__).resolve().parents[2]
    demo = (root / "config" / "demo.yaml").read_text()
    assert demo == (root / "watcher" / "data" / "default.yaml").read_text()


# -- metric paths ------------------------------------------------------------------------------


def test_metric_fields_follow_the_records() -> None:
    """Metric names come from the record dataclasses, minus names and tuple fields."""
    fields = cfg.metric_fields()
    assert fields["calibrant"] == tuple(
        f.name for f in dataclasses.fields(CalibrantDrift) if f.name != "name"
    )
    assert "name" not in fields["expected_ion"]
    assert len(fields["expected_ion"]) == len(dataclasses.fields(ExpectedIonResult)) - 1
    assert "precursor_charges" not in fields["signal"]
    assert "tic_median" in fields["signal"]
    assert len(fields["signal"]) == len(dataclasses.fields(SignalMetrics)) - 1
    assert fields["mass_correction"] == ("intercept_ppm", "slope_ppm_per_mz")


def test_flat_metric_names_are_known_paths() -> None:
    """Every path RunMetrics.flat() produces is accepted by the validator."""
    from watcher.records import MassCorrection, RunMetrics

    signal = SignalMetrics(
        ms1_count=1,
        ms2_count=0,
        rt_start_s=0.0,
        rt_end_s=1.0,
        tic_median=1.0,
        bpi_median=1.0,
        dropouts=0,
        longest_dropout_s=0.0,
    )
    drift = CalibrantDrift(
        name="siloxane-445",
        mz=445.120025,
        median_ppm=0.1,
        mad_ppm=0.1,
        p05_ppm=0.0,
        p95_ppm=0.2,
        found_fraction=1.0,
        median_intensity=1.0,
        slope_ppm_per_h=0.0,
    )
    ion = ExpectedIonResult(
        name="caffeine",
        mz=195.087652,
        found=True,
        apex_rt_s=1.0,
        apex_intensity=1.0,
        ppm=0.1,
        fwhm_s=1.0,
        m1_ratio=0.1,
        m1_ratio_expected=0.1,
    )
    metrics = RunMetrics(
        file="QC_1.mzML",
        format="mzML",
        acquired_at=None,
        signal=signal,
        calibrants=(drift,),
        mass_correction=MassCorrection(intercept_ppm=0, slope_ppm_per_mz=0, calibrants_used=2),
        expected_ions=(ion,),
    )
    known = set(cfg.known_metric_paths(["siloxane-445"], ["caffeine"]))
    assert set(metrics.flat()) <= known


def test_metric_wildcard_and_suggestion() -> None:
    """'*' stands for any configured name; a typo gets the nearest valid path."""
    assert cfg.metric_path_problem("calibrant.*.median_ppm", ["a"], []) is None
    assert cfg.metric_path_problem("expected_ions.missing_count", [], []) is None
    assert cfg.metric_path_problem("signal.tic_medain", [], []) == (
        "unknown metric 'signal.tic_medain' (did you mean 'signal.tic_median'?)"
    )
    message = cfg.metric_path_problem("calibrant.b.median_ppm", ["a"], [])
    assert message is not None
    assert message.startswith("unknown metric 'calibrant.b.median_ppm'")


def test_westgard_rule_names() -> None:
    """The six rule names of the multi-rule procedure (Westgard et al., Clin. Chem. 27 (1981))."""
    assert set(cfg.WESTGARD_RULES) == {"1-2s", "1-3s", "2-2s", "R-4s", "4-1s", "10x"}


def test_ewma_and_forecast_values_arrive_typed() -> None:
    """ewma lambda maps to lam, forecast severity to a Severity, baseline values to floats."""
    text = (
        "checks:\n"
        "  - name: qc\n"
        "    metric: signal.tic_median\n"
        "    ewma: {lambda: 0.3, L: 2.7}\n"
        "    cusum: {}\n"
        "    critical: {below: 1.0e4}\n"
        "    forecast: {runs: 5, warn_within_h: 6, severity: warning}\n"
    )
    check = load_config_text(text, source="lab.yaml").checks[0]
    assert check.ewma == cfg.EwmaSpec(lam=0.3, L=2.7)
    assert check.cusum == cfg.CusumSpec()
    assert check.forecast == cfg.ForecastSpec(runs=5, warn_within_h=6.0, severity=Severity.WARNING)
    assert check.critical == cfg.Condition(below=1e4)


@given(st.floats(allow_nan=False, allow_infinity=False))
def test_any_float_written_by_python_reads_back(value: float) -> None:
    """A float as Python prints it (1e-05, 2.5e+16, -0.0) reads back as the same float."""
    data, _lines, problems = read_yaml(f"x: {value!r}\n", source="t.yaml")
    assert problems == []
    assert data["x"] == value
    assert isinstance(data["x"], float)


@given(
    st.lists(
        st.tuples(
            st.integers(min_value=0, max_value=10_000), st.sampled_from(["s", "min", "h", "d"])
        ),
        min_size=1,
        max_size=3,
    )
)
def test_duration_is_sum_of_its_parts(parts: list[tuple[int, str]]) -> None:
    """'1h30min'-style durations are the sum of number x unit (60 s/min, 3600 s/h, 86400 s/d)."""
    seconds_per_unit = {"s": 1, "min": 60, "h": 3600, "d": 86400}  # common practice
    expected = sum(n * seconds_per_unit[unit] for n, unit in parts)
    text = "".join(f"{n}{unit}" for n, unit in parts)
    # The parser itself, under a Range wide enough for every sum drawn (up to 30 000 d): each
    # config key's own Range is tested by BAD_CONFIG_CASES.
    values = Values("lab.yaml", {}, Path("."))
    assert values.duration(("x",), text, Range(0, math.inf)) == expected
    assert values.problems == []


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("secrets_file: ''\n", "expected non-empty text, got ''"),
        ("secrets_file: 5\n", "expected non-empty text, got 5"),
        ("secrets_file: missing.yaml\n", "cannot read secrets file"),
        ("secrets_file: list.yaml\n", "expected a mapping of NAME: value"),
    ],
)
def test_secrets_file_problems(tmp_path: Path, text: str, fragment: str) -> None:
    """A secrets_file that is not a readable private mapping is one problem at its line."""
    (tmp_path / "list.yaml").write_text("- a\n- b\n")
    (tmp_path / "list.yaml").chmod(0o600)
    lab = tmp_path / "lab.yaml"
    lab.write_text(text)
    with pytest.raises(ConfigError) as caught:
        load_config(lab)
    assert len(caught.value.problems) == 1
    assert str(caught.value).startswith(f"{lab}:1: secrets_file: ")
    assert fragment in str(caught.value)


_WORDS = sorted({key for keys in KEYS.values() for key in keys})
_LEAVES = (
    st.none()
    | st.booleans()
    | st.integers(min_value=-5, max_value=10**6)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.sampled_from(["", "4h", "07:30", "1-3s", "QC_*", "re:(", "+H", "C8H10N4O2", "notice"])
    | st.text(max_size=8)
)
_TREES = st.recursive(
    _LEAVES,
    lambda inner: (
        st.lists(inner, max_size=4)
        | st.dictionaries(st.sampled_from(_WORDS) | st.text(max_size=5), inner, max_size=5)
    ),
    max_leaves=30,
)


@settings(max_examples=150, deadline=None)
@given(st.dictionaries(st.sampled_from(_WORDS), _TREES, max_size=6))
def test_any_yaml_gives_a_config_or_config_error(data: dict[str, object]) -> None:
    """Whatever shape the YAML has, loading returns a Config or raises ConfigError, nothing else."""
    text = yaml.safe_dump(data)
    config: cfg.Config | None = None
    problems: list[ConfigProblem] = []
    try:
        config = load_config_text(text, source="lab.yaml", environ={})
    except ConfigError as exc:
        problems = exc.problems
    if config is None:
        assert problems
        assert all(p.file == "lab.yaml" and p.message for p in problems)


def test_retry_waits_read_and_default() -> None:
    """alerts.retry_first_wait / retry_max_wait are durations; 5 s and 10 min when left out."""
    config = load_config_text(
        "alerts: {retry_first_wait: 30s, retry_max_wait: 1h}\n", source="lab.yaml"
    )
    assert (config.alerts.retry_first_wait_s, config.alerts.retry_max_wait_s) == (30.0, 3600.0)
    default = load_config_text("alerts: {}\n", source="lab.yaml")
    assert (default.alerts.retry_first_wait_s, default.alerts.retry_max_wait_s) == (5.0, 600.0)


def test_allowed_keys_are_the_model_fields() -> None:
    """Every field of every config record is a YAML key of its section (the table is derived,
    not a second list): a renamed key is read into its field, a loader-set field is no key."""
    import dataclasses

    from watcher.config import keys, load_config_text, model

    for section, records in keys._SECTIONS.items():
        for record in records:
            for f in dataclasses.fields(record):
                key = f.metadata.get(model.YAML_KEY, f.name)
                if key is not None and (record, f.name) not in keys._NESTED:
                    assert key in keys.KEYS[section], (section, f.name)
    assert "source" not in keys.KEYS["config"]
    assert "line" not in keys.KEYS["check"]
    assert "is" in keys.KEYS["condition"]
    assert "is_" not in keys.KEYS["condition"]
    config = load_config_text(
        "alerts:\n  remind_every: 2h\n  retry_for: 30min\n  retry_max_wait: 90s\n"
        "checks:\n  - name: t\n    metric: signal.tic_median\n"
        "    ewma: {lambda: 0.3, L: 2.5}\n",
        source="inline.yaml",
    )
    assert config.alerts.remind_every_s == 7200.0
    assert config.alerts.retry_for_s == 1800.0
    assert config.alerts.retry_max_wait_s == 90.0
    assert config.checks[0].ewma is not None
    assert config.checks[0].ewma.lam == 0.3


def test_every_number_in_the_config_has_a_range() -> None:
    """Each int or float field of the config records carries its Range (the one table of allowed
    values that validation reads), so no number can pass validation unbounded."""
    from watcher.config import model
    from watcher.config.keys import _SECTIONS

    records = {record for group in _SECTIONS.values() for record in group}
    missing = [
        f"{record.__name__}.{f.name}"
        for record in records
        for f in dataclasses.fields(record)
        if any(t in str(f.type) for t in ("int", "float"))
        and f.metadata.get(model.YAML_KEY, f.name) is not None  # None: set by the loader
        and not isinstance(f.metadata.get(model.RANGE), model.Range)
    ]
    assert missing == []
