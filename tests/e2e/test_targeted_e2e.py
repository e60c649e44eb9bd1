"""A targeted (SRM) queue through the real daemon: a run that lost a transition raises the
expected-ion alert at a real receiver on 127.0.0.1, and a complete run clears it.

The runs are chromatogram-only mzML files from synth/srm.py with exact truth: which
transitions were written, and where their peaks are.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from synth.srm import SrmSpec, SrmTransition, write_srm_mzml
from tests.helpers.wait import wait_for

if TYPE_CHECKING:
    from pathlib import Path

    from tests.helpers.daemon import Lab
    from tests.helpers.receiver import Receiver

INSTRUMENT = "Osprey-3 TQ"
TRANSITIONS = (
    SrmTransition(
        name="caffeine-138",
        precursor_mz=195.1,
        product_mz=138.1,
        apex_rt_s=90.0,
        height=4e5,
        sigma_s=3.0,
    ),
    SrmTransition(
        name="caffeine-110",
        precursor_mz=195.1,
        product_mz=110.1,
        apex_rt_s=90.0,
        height=1.6e5,
        sigma_s=3.0,
    ),
    SrmTransition(
        name="theophylline-124",
        precursor_mz=181.1,
        product_mz=124.1,
        apex_rt_s=70.0,
        height=2e5,
        sigma_s=3.0,
    ),
)


def _run(tmp: Path, name: str, *, lose: str | None = None) -> bytes:
    transitions = tuple(
        SrmTransition(**{**{f: getattr(t, f) for f in t.__dataclass_fields__}, "present": False})
        if t.name == lose
        else t
        for t in TRANSITIONS
    )
    path = tmp / name
    truth = write_srm_mzml(path, SrmSpec(transitions=transitions, duration_s=180.0))
    assert truth.missing == ((lose,) if lose else ())
    return path.read_bytes()


def _drop(lab: Lab, name: str, data: bytes) -> None:
    part = lab.exports / f".{name}.part"
    part.write_bytes(data)
    part.rename(lab.exports / name)


def test_lost_transition_raises_the_expected_ion_alert(
    lab: Lab, receiver: Receiver, tmp_path: Path
) -> None:
    """SRM_01 complete: ok, no message. SRM_02 without theophylline-124: critical, one message
    naming it. SRM_03 complete again: the alert clears."""
    lab.write_config(
        instrument={"name": INSTRUMENT, "timezone": "UTC"},
        calibrants=[],
        expected_ions=[
            {"name": t.name, "mz": t.precursor_mz, "product_mz": t.product_mz} for t in TRANSITIONS
        ],
        checks=[
            {
                "name": "transition present",
                "metric": "expected_ion.*.found",
                "critical": {"is": False},
            }
        ],
        alerts={"channels": [{"name": "lab-chat", "url": receiver.url()}]},
    )
    daemon = lab.start()
    _drop(lab, "SRM_01.mzML", _run(tmp_path, "a.mzML"))
    lab.wait_runs(1)
    _drop(lab, "SRM_02.mzML", _run(tmp_path, "b.mzML", lose="theophylline-124"))
    lab.wait_runs(2)
    wait_for(lambda: len(receiver.bodies) >= 1, 15, "the alert at the receiver")
    _drop(lab, "SRM_03.mzML", _run(tmp_path, "c.mzML"))
    lab.wait_runs(3)
    wait_for(lambda: len(receiver.bodies) >= 2, 15, "the all-clear at the receiver")
    assert daemon.stop() == 0
    assert [status for _, status, _ in lab.runs()] == ["ok", "critical", "ok"]
    assert receiver.titles() == [
        f"{INSTRUMENT}: CRITICAL SRM_02.mzML",
        f"{INSTRUMENT}: OK SRM_03.mzML",
    ]
    raised = receiver.bodies[0]["message"]
    assert "theophylline-124" in raised
    assert "caffeine-138" not in raised
