"""Configs for tests: ``lab_config`` (a typed Config with the lab's two checks and one channel)
and ``BAD_CONFIG_CASES``, every kind of config mistake with the line, key path and message it
must be reported with (``marker_line`` finds the line).
"""

from __future__ import annotations

import textwrap
from typing import Any

import pytest

from watcher.config import Alerts, Channel, Check, Condition, Config, Instrument


def lab_config(url: str, **alerts: object) -> Config:
    settings: dict[str, object] = {"connect_timeout_s": 1.0, "read_timeout_s": 1.0}
    settings.update(alerts)
    channels = settings.pop("channels", None) or (Channel(name="lab-chat", url=url),)
    return Config(
        instrument=Instrument(name="Kestrel-2 Q-TOF", timezone="Europe/Oslo"),
        checks=(
            Check(
                name="calibration drift",
                metric="calibrant.siloxane-445.median_ppm",
                warning=Condition(outside=(-3.0, 3.0)),
                critical=Condition(outside=(-5.0, 5.0)),
            ),
            Check(
                name="caffeine present",
                metric="expected_ion.caffeine.found",
                applies_to=("QC_*.mzML",),
                critical=Condition(is_=False),
            ),
        ),
        alerts=Alerts(channels=channels, **settings),  # type: ignore[arg-type]
    )


MARK = "#<"  # the line each case expects in the message carries this marker

_IONS = """\
calibrants:
  - {name: siloxane-445, mz: 445.120025, search_ppm: 30}
expected_ions:
  - {name: caffeine, formula: C8H10N4O2, adduct: "+H", rt_window_min: [2.0, 4.0]}
"""


def _case(case_id: str, body: str, key_path: str, fragment: str) -> Any:
    """One case: the ion block, then ``body``; pytest.param's type is private, hence Any."""
    return pytest.param(_IONS + textwrap.dedent(body), key_path, fragment, id=case_id)


# (id, YAML after the ion block, key path, part of the message). The outside source of the rule
# being enforced is named in the comment where there is one; the rest is this project's contract.
BAD_CONFIG_CASES = [
    _case(
        "unknown-top-key",
        "instrumnet: {name: x}  #<\n",
        "",
        "unknown key 'instrumnet' (did you mean 'instrument'?)",
    ),
    _case(
        "unknown-ion-key",
        "checks: []\nwatch:\n  folders: []\n  setle_s: 3  #<\n",
        "watch",
        "unknown key 'setle_s' (did you mean 'settle_s'?)",
    ),
    _case(
        "low-above-high",
        """\
        checks:
          - name: drift
            metric: calibrant.siloxane-445.median_ppm
            critical: {outside: [5, -5]}  #<
        """,
        "checks[0].critical.outside",
        "expected [low, high] with low < high, got [5, -5]",
    ),
    _case(
        "settle-text", "watch: {settle_s: soon}  #<\n", "watch.settle_s", "expected a duration > 0"
    ),
    _case("settle-zero", "watch: {settle_s: 0}  #<\n", "watch.settle_s", "got 0"),
    _case(
        "negative-duration", "alerts: {remind_every: -60}  #<\n", "alerts.remind_every", "got -60"
    ),
    _case(
        "bad-duration-unit",
        "alerts: {retry_for: 4 hours}  #<\n",
        "alerts.retry_for",
        "got '4 hours'",
    ),
    _case(
        "retry-waits-reversed",
        "alerts: {retry_first_wait: 20min, retry_max_wait: 10min}  #<\n",
        "alerts.retry_first_wait",
        "retry_first_wait (1200 s) is longer than retry_max_wait (600 s)",
    ),
    _case(
        "unknown-severity",
        """\
        alerts:
          channels:
            - name: chat
              url: json://127.0.0.1:9/x
              min_severity: urgent  #<
        """,
        "alerts.channels[0].min_severity",
        # RFC 5424 severity words used by this project: notice, warning, critical
        "expected one of notice, warning, critical, got 'urgent'",
    ),
    _case(
        "unknown-severity-key",
        """\
        checks:
          - name: drift
            metric: calibrant.*.median_ppm
            error: {above: 5}  #<
        """,
        "checks[0]",
        "unknown key 'error'",
    ),
    _case(
        "westgard-name",
        """\
        checks:
          - name: qc
            metric: calibrant.siloxane-445.median_ppm
            westgard:
              - 1-3s
              - 13s  #<
        """,
        "checks[0].westgard[1]",
        # rule names: Westgard, Barry, Hunt, Groth, Clin. Chem. 27 (1981) 493-501
        "got '13s' (did you mean '1-3s'?)",
    ),
    _case(
        "ewma-lambda-high",
        """\
        checks:
          - name: qc
            metric: calibrant.siloxane-445.median_ppm
            ewma: {lambda: 1.5}  #<
        """,
        "checks[0].ewma.lambda",
        # NIST/SEMATECH e-Handbook 6.3.2.4: the EWMA weight satisfies 0 < lambda <= 1
        "expected a number > 0 and <= 1, got 1.5",
    ),
    _case(
        "ewma-lambda-zero",
        "checks:\n  - name: qc\n    metric: signal.tic_median\n    ewma: {lambda: 0}  #<\n",
        "checks[0].ewma.lambda",
        "got 0",
    ),
    _case(
        "bad-regex",
        """\
        checks:
          - name: ions
            metric: expected_ion.*.found
            applies_to: "re:QC_("  #<
            critical: {is: false}
        """,
        "checks[0].applies_to",
        "bad regular expression 'QC_('",  # Python re syntax: unbalanced parenthesis
    ),
    _case(
        "regex-nested-quantifier",
        """\
        checks:
          - name: ions
            metric: expected_ion.*.found
            applies_to: "re:(a+)+$"  #<
            critical: {is: false}
        """,
        "checks[0].applies_to",
        # the classic exponential-backtracking shape (OWASP, "ReDoS")
        "regular expression '(a+)+$' can take exponential time (a quantified group contains",
    ),
    _case(
        "regex-overlapping-alternation",
        """\
        checks:
          - name: ions
            metric: expected_ion.*.found
            applies_to:
              - QC_*.mzML
              - "re:(QC|Q.)*_run.mzML"  #<
            critical: {is: false}
        """,
        "checks[0].applies_to[1]",
        "a quantified alternation has branches that match the same text",
    ),
    _case(
        "regex-too-long",
        f"""\
        checks:
          - name: ions
            metric: expected_ion.*.found
            applies_to: "re:{"a" * 201}"  #<
            critical: {{is: false}}
        """,
        "checks[0].applies_to",
        "regular expression is 201 characters long (at most 200)",
    ),
    _case(
        "queue-max-zero",
        "checks: []\nlimits:\n  queue_max: 0  #<\n",
        "limits.queue_max",
        "expected an integer >= 1, got 0",
    ),
    _case(
        "no-condition",
        "checks:\n  - name: lonely  #<\n    metric: signal.tic_median\n",
        "checks[0]",
        "a check needs a condition (notice, warning or critical) or a trend rule",
    ),
    _case(
        "duplicate-check",
        """\
        checks:
          - {name: drift, metric: signal.tic_median, warning: {below: 1.0e5}}
          - {name: drift, metric: signal.bpi_median, warning: {below: 1.0e4}}  #<
        """,
        "checks[1].name",
        "duplicate check name 'drift' (also checks[0])",
    ),
    _case(
        "channel-url-empty",
        "alerts:\n  channels:\n    - name: chat\n      url: ''  #<\n",
        "alerts.channels[0].url",
        "expected non-empty text, got ''",
    ),
    _case(
        "digest-time", "digest_at: '7.30'  #<\n", "digest_at", 'expected a time of day as "HH:MM"'
    ),
    _case("digest-hour", "digest_at: '25:00'  #<\n", "digest_at", "got '25:00'"),
    _case(
        "timezone",
        "instrument:\n  timezone: Europe/Olso  #<\n",
        "instrument.timezone",
        "(did you mean 'Europe/Oslo'?)",  # IANA tz database zone names, through zoneinfo
    ),
    _case(
        "metric-field",
        "checks:\n  - name: drift\n    metric: calibrant.*.median_pmm  #<\n"
        "    warning: {above: 3}\n",
        "checks[0].metric",
        "unknown metric 'calibrant.*.median_pmm' (did you mean 'calibrant.*.median_ppm'?)",
    ),
    _case(
        "metric-calibrant",
        "checks:\n  - name: drift\n    metric: calibrant.siloxane-446.median_ppm  #<\n"
        "    warning: {above: 3}\n",
        "checks[0].metric",
        "(did you mean 'calibrant.siloxane-445.median_ppm'?)",
    ),
    _case(
        "metric-ion",
        "checks:\n  - name: ions\n    metric: expected_ion.cafeine.found  #<\n"
        "    critical: {is: false}\n",
        "checks[0].metric",
        "(did you mean 'expected_ion.caffeine.found'?)",
    ),
    _case(
        "env-unset",
        "alerts:\n  channels:\n    - name: chat\n      url: ${IONWARDEN_TEST_UNSET_URL}  #<\n",
        "alerts.channels[0].url",
        "${IONWARDEN_TEST_UNSET_URL} is not set in the environment or secrets_file",
    ),
    _case(
        "ratio-without-baseline",
        "checks:\n  - name: tic\n    metric: signal.tic_median\n"
        "    critical: {below_ratio: 0.3}  #<\n",
        "checks[0].critical.below_ratio",
        "add 'against: baseline' to the check",
    ),
    _case(
        "for-runs-zero",
        "checks:\n  - name: tic\n    metric: signal.tic_median\n    warning: {below: 1}\n"
        "    for_runs: 0  #<\n",
        "checks[0].for_runs",
        "expected an integer >= 1, got 0",
    ),
    _case(
        "channel-check-name",
        """\
        checks:
          - {name: calibration drift, metric: calibrant.*.median_ppm, warning: {outside: [-3, 3]}}
        alerts:
          channels:
            - name: chat
              url: json://127.0.0.1:9/x
              checks: [calibraton drift]  #<
        """,
        "alerts.channels[0].checks[0]",
        "no check is named 'calibraton drift' (did you mean 'calibration drift'?)",
    ),
    _case(
        "baseline-min-runs",
        """\
        checks:
          - name: tic
            metric: signal.tic_median
            against: baseline
            baseline:
              runs: 5
              min_runs: 8  #<
            critical: {below_ratio: 0.3}
        """,
        "checks[0].baseline.min_runs",
        "expected min_runs <= runs (5), got 8",
    ),
    _case(
        "forecast-no-limit",
        """\
        checks:
          - name: trend
            metric: calibrant.siloxane-445.median_ppm
            forecast: {runs: 8}  #<
        """,
        "checks[0].forecast",
        "a forecast needs a fixed critical limit",
    ),
    _case(
        "python-tag",
        "instrument:\n  name: !!python/object/apply:os.system ['true']  #<\n",
        "instrument.name",
        "refused: YAML tag",
    ),
    _case(
        "keep-days-text",
        "health_log: {keep_days: ninety}  #<\n",
        "health_log.keep_days",
        "got 'ninety'",
    ),
    _case(
        "active-hours",
        "alerts:\n  active_hours: ['18:00']  #<\n",
        "alerts.active_hours",
        'expected ["HH:MM", "HH:MM"]',
    ),
    _case(
        "yes-is-not-bool",
        "alerts:\n  send_cleared: yes  #<\n",
        "alerts.send_cleared",
        # YAML 1.2.2 core schema (10.3.2): only true/false are booleans
        "expected true or false, got 'yes'",
    ),
    _case("syntax", "watch: {settle_s: 2\ninstrument: {}  #<\n", "", "not valid YAML"),
    _case(
        "duplicate-yaml-key",
        "watch:\n  settle_s: 2\n  settle_s: 3  #<\n",
        "watch",
        "duplicate key 'settle_s' (first given on line",
    ),
    _case(
        "baseline-mean-only",
        "checks:\n  - name: qc\n    metric: signal.tic_median\n    westgard: [1-3s]\n"
        "    baseline: {mean: 1.0e6}  #<\n",
        "checks[0].baseline.mean",
        "needs both mean and sd; sd is missing",
    ),
    _case(
        "check-missing-metric",
        "checks:\n  - name: tic  #<\n    warning: {below: 1}\n",
        "checks[0]",
        "missing required key 'metric'",
    ),
    _case(
        "section-not-mapping", "watch: [a, b]  #<\n", "watch", "expected a mapping of watch keys"
    ),
]

# A number 26 digits long: each key has a Range (watcher.config.model) and validation names it.
HUGE = "1" + "0" * 26
BAD_CONFIG_CASES += [
    _case(
        "huge-settle",
        f"watch: {{settle_s: {HUGE}}}  #<\n",
        "watch.settle_s",
        f"expected a duration > 0 and at most 1d (86400 s), got {HUGE}",
    ),
    _case(
        "huge-alert-timeout",
        f"alerts: {{timeout_s: {HUGE}}}  #<\n",
        "alerts.timeout_s",
        f"expected a duration > 0 and at most 1h (3600 s), got {HUGE}",
    ),
    _case(
        "huge-read-timeout",
        f"alerts: {{read_timeout_s: {HUGE}}}  #<\n",
        "alerts.read_timeout_s",
        "at most 5min (300 s)",
    ),
    _case(
        "huge-retry-for",
        f"alerts: {{retry_for: {HUGE}}}  #<\n",
        "alerts.retry_for",
        "at most 30d (2592000 s)",
    ),
    _case(
        "huge-parse-memory",
        f"limits: {{parse_memory_mb: {HUGE}}}  #<\n",
        "limits.parse_memory_mb",
        f"expected an integer >= 64 and <= 1048576, got {HUGE}",
    ),
    _case(
        "huge-parse-timeout",
        "limits: {parse_timeout_s: 1e26}  #<\n",
        "limits.parse_timeout_s",
        "expected a duration > 0 and at most 1d (86400 s), got 1e+26",
    ),
    _case(
        "huge-baseline-runs",
        f"""\
        checks:
          - name: drift
            metric: calibrant.siloxane-445.median_ppm
            against: baseline
            baseline: {{runs: {HUGE}}}  #<
            warning: {{z_outside: [-3, 3]}}
        """,
        "checks[0].baseline.runs",
        "expected an integer >= 1 and <= 10000",
    ),
    _case(
        "huge-threshold",
        """\
        checks:
          - name: drift
            metric: calibrant.siloxane-445.median_ppm
            critical: {above: 1.0e+26}  #<
        """,
        "checks[0].critical.above",
        "expected a number between -1e+15 and 1e+15, got 1e+26",
    ),
]

# Ion cases replace the ion block itself, so the markers sit on their own lines.
ION_CASES = [
    pytest.param(
        "expected_ions:\n  - {name: mrfa, peptide: MRFA, charge: 2, rt_window_min: [7, 5]}  #<\n",
        "expected_ions[0].rt_window_min",
        "expected [low, high] with 0 <= low < high, got [7, 5]",
        id="rt-window",
    ),
    pytest.param(
        "calibrants:\n  - {name: lock, search_ppm: 5}  #<\n",
        "calibrants[0]",
        "an ion needs one of mz, formula (with adduct) or peptide (with charge)",
        id="ion-none",
    ),
    pytest.param(
        "calibrants:\n  - name: lock\n    mz: 445.12\n    formula: C12H36O6Si6  #<\n"
        "    adduct: '+H'\n",
        "calibrants[0].formula",
        "give only one of mz, formula or peptide, got mz and formula",
        id="ion-two-ways",
    ),
    pytest.param(
        "expected_ions:\n  - name: mrfa\n    peptide: MRFA\n    charge: 0  #<\n",
        "expected_ions[0].charge",
        "expected an integer other than 0, got 0",  # common practice: charge 0 is no ion
        id="charge-zero",
    ),
    pytest.param(
        "calibrants:\n  - {name: a, mz: 445.12, search_ppm: 0}  #<\n",
        "calibrants[0].search_ppm",
        "expected a number > 0, got 0",
        id="search-ppm-zero",
    ),
    pytest.param(
        "calibrants:\n  - {name: a, mz: 445.12}\n  - {name: a, mz: 556.28}  #<\n",
        "calibrants[1].name",
        "duplicate calibrant name 'a' (also calibrants[0])",
        id="duplicate-calibrant",
    ),
    pytest.param(
        "expected_ions:\n  - {name: c, mz: 195.09}\n  - {name: c, mz: 262.64}  #<\n",
        "expected_ions[1].name",
        "duplicate expected_ion name 'c' (also expected_ions[0])",
        id="duplicate-ion",
    ),
    pytest.param(
        "calibrants:\n  - {name: lock, mz: 445.12, adduct: '+H'}  #<\n",
        "calibrants[0].adduct",
        "adduct does not apply to an ion given by mz",
        id="adduct-with-mz",
    ),
    pytest.param(
        "calibrants:\n  - {name: caf, formula: C8H10N4O2, adduct: 'H+'}  #<\n",
        "calibrants[0].adduct",
        "expected an adduct such as +H",
        id="adduct-syntax",
    ),
    pytest.param(
        "calibrants:\n  - {name: lock.1, mz: 445.12}  #<\n",
        "calibrants[0].name",
        "a name cannot contain '.'",
        id="name-with-dot",
    ),
    pytest.param(
        "calibrants:\n  - {name: lock, peptide: YGG1L}  #<\n",
        "calibrants[0].peptide",
        "expected a peptide in one-letter amino-acid codes",
        id="peptide-digit",
    ),
    pytest.param(
        "calibrants:\n  - {name: lock, mz: 445.12, serch_ppm: 30}  #<\n",
        "calibrants[0]",
        "unknown key 'serch_ppm' (did you mean 'search_ppm'?)",
        id="ion-typo",
    ),
]

ION_CASES.append(
    pytest.param(
        f"calibrants:\n  - {{name: a, mz: 445.12, search_ppm: {HUGE}}}  #<\n",
        "calibrants[0].search_ppm",
        f"expected a number > 0 and <= 1000000, got {HUGE}",
        id="huge-search-ppm",
    )
)

BAD_CONFIG_CASES += ION_CASES


def marker_line(text: str) -> int:
    """1-based number of the line carrying the marker."""
    return next(i for i, line in enumerate(text.splitlines(), start=1) if MARK in line)
