"""A verdict is judged by what it does to predictions whose error we control: the split's own
reference scores zero, and every failure rate and severity aggregate is non-decreasing as the
known noise grows, on every bundled network."""

import numpy as np
import pytest

import flowgauge
from flowgauge.errors import InputError
from flowgauge.baselines._calibration import CALIBRATION_LEVELS, calibration_predictions
from flowgauge.scoring import score_arrays

NETWORKS = ("demo", "ieee14", "ieee30", "ieee57", "ieee118", "ieee300")
SAMPLES = 60  # the first samples of each split keep the test fast


def _aggregates(sp, level):
    pg, vm = calibration_predictions(sp, level)
    order = np.argsort(sp.sample_id)[:SAMPLES]
    agg, _ = score_arrays(sp.network, sample_id=np.asarray(sp.sample_id)[order], pd_mw=sp.pd_mw[order],
                          qd_mvar=sp.qd_mvar[order], reference_cost_per_h=sp.references.objective[order],
                          pg_mw=pg[order], vm_pu=vm[order])
    return agg


def _ladder_values(agg):
    """Every failure rate and severity aggregate of the scorecard, by name."""
    out = {"restoration_failure_rate": agg["restoration_failure_rate"],
           "severity_mean": agg["severity"]["mean"], "severity_p95": agg["severity"]["p95"],
           "severity_max": agg["severity"]["max"], "unsolved_share": 1.0 - agg["solved_share"]}
    for m, f in zip(agg["tolerance_curve"]["multiples"], agg["tolerance_curve"]["failure_rate"]):
        out[f"failure_rate_at_{m}x"] = f
    for t, s in zip(agg["solved_curve"]["thresholds_pct"], agg["solved_curve"]["share"]):
        out[f"unsolved_at_{t}pct"] = 1.0 - s
    return out


@pytest.mark.parametrize("network", NETWORKS)
@pytest.mark.parametrize("split_name", ["test-id", "test-ood"])
def test_verdict_is_monotone_in_the_size_of_the_error(network, split_name):
    sp = flowgauge.load_split(network, split_name)
    ladder = [_ladder_values(_aggregates(sp, level)) for level in (0.0, *CALIBRATION_LEVELS)]
    # the exact reference: nothing fails (common practice: a verdict is zero for the optimum)
    assert ladder[0]["restoration_failure_rate"] == 0.0 and ladder[0]["unsolved_share"] == 0.0
    # severity of the reference itself: its limits hold to the AC-OPF's 1e-6 p.u. feasibility
    # tolerance, i.e. 1e-5 of a 0.1 p.u. voltage band
    assert ladder[0]["severity_max"] < 1e-5
    for lower, higher in zip(ladder, ladder[1:]):
        for name in lower:
            assert higher[name] >= lower[name] - 1e-12, (network, split_name, name, lower[name], higher[name])


def test_calibration_noise_is_seeded_and_sized():
    sp = flowgauge.load_split("ieee14", "test-id")
    pg1, vm1 = calibration_predictions(sp, 1e-3)
    pg2, vm2 = calibration_predictions(sp, 1e-3)
    assert np.array_equal(pg1, pg2) and np.array_equal(vm1, vm2)
    # N(0, 1e-3): the sample standard deviation of about 7,000 voltage draws is within 5 %
    d = (vm1 - sp.references.vm_pu).ravel()
    assert abs(d.std() / 1e-3 - 1) < 0.05
    with pytest.raises(InputError, match="expected a noise level >= 0"):
        calibration_predictions(sp, -1.0)
