"""Two-sided tabular CUSUM (analytics.core.cusum)."""

import numpy as np
import pytest

from analytics.core.cusum import CUSUM_H, CUSUM_K, cusum_paths, detect_steps, first_alarm

CHAINS = 6000
CHUNK = 1000


def simulated_arl(h: float, shift: float, length: int, seed: int) -> tuple[float, float]:
    """Mean run length and its standard error over CHAINS seeded chains."""
    rng = np.random.default_rng(seed)
    runs = []
    for _ in range(CHAINS // CHUNK):
        z = rng.standard_normal((CHUNK, length)) + shift
        idx = first_alarm(z, k=0.5, h=h)
        assert np.all(idx >= 0), "a chain never signalled: lengthen the simulation"
        runs.append(idx + 1)
    rl = np.concatenate(runs).astype(float)
    return rl.mean(), rl.std(ddof=1) / np.sqrt(rl.size)


# reference: Montgomery, Introduction to Statistical Quality Control, ch. 9, table of ARL values
# for the tabular CUSUM with k = 1/2 (from memory): shift 0 → 168 (h=4), 465 (h=5);
# shift 1σ → 8.38 (h=4), 10.4 (h=5).
@pytest.mark.parametrize(
    ("h", "shift", "table_arl", "length"),
    [(4.0, 0.0, 168.0, 3000), (5.0, 0.0, 465.0, 7000), (4.0, 1.0, 8.38, 200), (5.0, 1.0, 10.4, 200)],
)
def test_average_run_length_matches_montgomerys_table_within_simulation_error(
    h, shift, table_arl, length
):
    mean, se = simulated_arl(h, shift, length, seed=int(10 * h + shift))
    # 4 standard errors of the simulation plus 1 % for the table's rounding
    assert abs(mean - table_arl) <= 4 * se + 0.01 * table_arl, (mean, se)


def test_defaults_are_the_stated_k_and_h():
    # reference: Montgomery ch. 9 recommends k = 0.5 and h = 4 or 5 (σ units)
    assert (CUSUM_K, CUSUM_H) == (0.5, 5.0)


def test_paths_follow_the_tabular_recursion_written_out_by_hand():
    rng = np.random.default_rng(1)
    z = rng.standard_normal(50)
    up, lo = cusum_paths(z)
    cp = cm = 0.0
    for i, zi in enumerate(z):
        cp = max(0.0, zi - 0.5 + cp)
        cm = max(0.0, -zi - 0.5 + cm)
        assert up[i] == pytest.approx(cp, abs=1e-12)
        assert lo[i] == pytest.approx(cm, abs=1e-12)


def test_stacked_series_give_the_same_paths_as_one_at_a_time():
    rng = np.random.default_rng(2)
    z = rng.standard_normal((4, 30))
    up, lo = cusum_paths(z)
    for r in range(4):
        u1, l1 = cusum_paths(z[r])
        np.testing.assert_allclose(up[r], u1, atol=1e-12)
        np.testing.assert_allclose(lo[r], l1, atol=1e-12)


@pytest.mark.parametrize("direction", [1, -1])
def test_a_synthetic_step_is_found_and_pages_estimate_brackets_its_index(direction):
    bracketed = close = 0
    seeds = range(100)
    for seed in seeds:
        rng = np.random.default_rng(seed)
        z = rng.standard_normal(60)
        z[35:] += direction * 3.0
        found = [s for s in detect_steps(z) if s.direction == direction and s.alarm_index >= 35]
        assert found, seed
        bracketed += found[0].start_index <= 35 <= found[0].alarm_index
        close += abs(found[0].start_index - 35) <= 3
    # Page's rule (Montgomery ch. 9) starts the step after the alarming side was last zero: it
    # brackets the true start almost always and is usually within a few readings of it (the
    # drift fit refines it, see test_drift).
    assert bracketed >= 95
    assert close >= 75


def test_no_step_in_a_short_in_control_series_for_most_seeds():
    # in-control ARL 465 (Montgomery, from memory): a 40-reading series rarely signals
    alarms = sum(bool(detect_steps(np.random.default_rng(s).standard_normal(40))) for s in range(200))
    assert alarms / 200 < 0.15


def test_bad_inputs_are_refused():
    with pytest.raises(ValueError, match="finite"):
        cusum_paths([0.0, np.nan])
    with pytest.raises(ValueError, match="h"):
        cusum_paths([0.0], h=0.0)
    with pytest.raises(ValueError, match="k"):
        cusum_paths([0.0], k=-1.0)
    with pytest.raises(ValueError, match="shape"):
        detect_steps(np.zeros((2, 3)))
