"""Pure status computations, checked against examples worked by hand in the comments.

Every expected number below is derived in the comment beside it from straight lines between
samples (the method stated in app/status/compute.py), not from running the code.
"""

from datetime import UTC, date, datetime, timedelta

import numpy as np
import pytest

from app.status.compute import (
    StatusInputError,
    batch_exposure,
    completeness_percent,
    covered_minutes,
    day_range,
    fill_window_hint,
    infer_sampling_interval,
    local_day_window,
    minutes_below,
    qc_counts,
)

T0 = datetime(2026, 6, 1, 12, 0, tzinfo=UTC)


def at(minutes: float) -> datetime:
    return T0 + timedelta(minutes=minutes)


def test_minutes_below_regular_series_with_crossings():
    # 2.0 -> 1.0 over 10 min crosses 1.5 half-way: 5 min below; 1.0 -> 1.0: 10 min;
    # 1.0 -> 2.0: 5 min. Total 20 min.
    times = [at(0), at(10), at(20), at(30)]
    values = [2.0, 1.0, 1.0, 2.0]
    assert minutes_below(times, values, 1.5, start=at(0), end=at(30)) == pytest.approx(20.0)


def test_minutes_below_irregular_sampling():
    # 1.0 -> 2.0 over 3 min is below 1.5 for the first half: 1.5 min; 2.0 -> 2.0 never.
    times = [at(0), at(3), at(15)]
    values = [1.0, 2.0, 2.0]
    assert minutes_below(times, values, 1.5, start=at(0), end=at(15)) == pytest.approx(1.5)


def test_minutes_below_leaves_long_gaps_out():
    # 0 -> 10 min is bridged (10 min below); 10 -> 60 min is a 50-min gap > 30 min: not counted.
    times = [at(0), at(10), at(60)]
    values = [1.0, 1.0, 1.0]
    kwargs = {"start": at(0), "end": at(60), "max_gap": timedelta(minutes=30)}
    assert minutes_below(times, values, 1.5, **kwargs) == pytest.approx(10.0)
    assert covered_minutes(times, values, **kwargs) == pytest.approx(10.0)
    # With a limit that bridges the gap, the whole hour counts.
    kwargs["max_gap"] = timedelta(hours=1)
    assert minutes_below(times, values, 1.5, **kwargs) == pytest.approx(60.0)


def test_minutes_below_clips_to_the_window():
    # Window 5..25 min of the first series. 5..10: line 1.5 -> 1.0, strictly below 1.5 all
    # 5 min; 10..20: 10 min; 20..25: 1.0 -> 1.5, 5 min. Total 20 min of a 20-min window.
    times = [at(0), at(10), at(20), at(30)]
    values = [2.0, 1.0, 1.0, 2.0]
    assert minutes_below(times, values, 1.5, start=at(5), end=at(25)) == pytest.approx(20.0)
    assert covered_minutes(times, values, start=at(5), end=at(25)) == pytest.approx(20.0)


def test_minutes_below_ignores_order_nan_and_averages_same_instant():
    # Two sources at minute 10 report 1.0 and 2.0 -> one value 1.5 (their mean).
    # Series 2.0 @0, 1.5 @10, 2.0 @20: never strictly below 1.5 -> 0 min.
    times = [at(20), at(10), at(0), at(10), at(15)]
    values = [2.0, 1.0, 2.0, 2.0, float("nan")]
    assert minutes_below(times, values, 1.5, start=at(0), end=at(20)) == 0.0
    # Below 1.75: 2.0 -> 1.5 is below 1.75 for its second half (5 min), and likewise 1.5 -> 2.0
    # for its first half (5 min): 10 min.
    assert minutes_below(times, values, 1.75, start=at(0), end=at(20)) == pytest.approx(10.0)


def test_minutes_below_accepts_datetime64():
    times = np.array(["2026-06-01T12:00", "2026-06-01T12:10"], dtype="datetime64[s]")
    assert minutes_below(times, [1.0, 1.0], 1.5, start=at(0), end=at(10)) == pytest.approx(10.0)


def test_naive_times_are_refused():
    with pytest.raises(StatusInputError, match="times"):
        minutes_below([datetime(2026, 6, 1), datetime(2026, 6, 2)], [1, 1], 1.5,
                      start=at(0), end=at(10))


def test_day_range_skips_missing_values():
    result = day_range([1.0, 2.0, None, float("nan"), 3.0])
    assert (result.minimum, result.mean, result.maximum, result.count) == (1.0, 2.0, 3.0, 3)
    assert day_range([]).as_dict() == {"min": None, "mean": None, "max": None, "n": 0}


def test_infer_sampling_interval_is_the_median_spacing():
    # Spacings 5, 5, 5, 45 min -> median 5 min; a repeated timestamp is not a zero spacing.
    times = [at(0), at(5), at(5), at(10), at(15), at(60)]
    assert infer_sampling_interval(times) == timedelta(minutes=5)
    assert infer_sampling_interval([at(0)]) is None


def test_completeness_counts_filled_slots():
    # 60 min in 10-min slots = 6 slots. Readings at 1 and 2 (slot 0), 15 (slot 1), 35 (slot 3),
    # 59 (slot 5); 60 lies outside [start, end). 4 of 6 slots = 66.67 %.
    times = [at(1), at(2), at(15), at(35), at(59), at(60)]
    pct = completeness_percent(times, start=at(0), end=at(60),
                               expected_interval=timedelta(minutes=10))
    assert pct == pytest.approx(400 / 6)


def test_completeness_partial_last_slot_and_empty_window():
    # 25 min in 10-min slots = 3 slots (the last one 5 min long); all three have a reading.
    times = [at(0), at(10), at(24)]
    assert completeness_percent(times, start=at(0), end=at(25),
                                expected_interval=timedelta(minutes=10)) == pytest.approx(100.0)
    assert completeness_percent(times, start=at(0), end=at(0),
                                expected_interval=timedelta(minutes=10)) is None


def test_qc_counts_by_flag_name():
    # Flag scheme of the IOOS QARTOD manuals: 1 pass, 2 not evaluated, 3 suspect, 4 fail,
    # 9 missing.
    assert qc_counts([1, 1, 3, 4, None, 2, 9]) == {
        "pass": 2, "not_evaluated": 1, "suspect": 1, "fail": 1, "missing": 2,
    }
    with pytest.raises(StatusInputError, match="flags"):
        qc_counts([5])


def test_local_day_window_on_clock_change_days():
    # US clocks go forward on the second Sunday of March and back on the first Sunday of
    # November (Energy Policy Act of 2005, sec. 110): 2026-03-08 and 2026-11-01.
    start, end = local_day_window(date(2026, 3, 8), "America/Los_Angeles")
    assert start == datetime(2026, 3, 8, 8, 0, tzinfo=UTC)  # midnight PST = UTC-8
    assert end - start == timedelta(hours=23)
    start, end = local_day_window(date(2026, 11, 1), "America/Los_Angeles")
    assert start == datetime(2026, 11, 1, 7, 0, tzinfo=UTC)  # midnight PDT = UTC-7
    assert end - start == timedelta(hours=25)
    with pytest.raises(StatusInputError, match="timezone"):
        local_day_window(date(2026, 1, 1), "Mars/Olympus")


def test_fill_window_hint_uses_local_hours_and_medians():
    # Pacific daylight time in June is UTC-7: 12:xx UTC is 05:xx local, 21:xx UTC is 14:xx local.
    def utc(day, hour, minute=0):
        return datetime(2026, 6, day, hour, minute, tzinfo=UTC)

    times = [utc(1, 12), utc(2, 12),                  # local 05h: 1.0, 1.2 -> median 1.1
             utc(1, 21), utc(1, 21, 30), utc(2, 21),  # local 14h: 2.0, 2.4, 2.2 -> 2.2
             utc(1, 22)]                              # local 15h: 1.9
    values = [1.0, 1.2, 2.0, 2.4, 2.2, 1.9]
    hint = fill_window_hint(times, values, timezone="America/Los_Angeles", best=2)
    assert hint.hourly_median[5] == pytest.approx(1.1)
    assert hint.hourly_median[14] == pytest.approx(2.2)
    assert hint.hourly_median[15] == pytest.approx(1.9)
    assert hint.hourly_median[0] is None
    assert hint.hourly_count[14] == 3
    assert hint.best_hours == [14, 15]
    # Hours with too few values are not recommended.
    assert fill_window_hint(times, values, timezone="America/Los_Angeles", best=2,
                            min_count=2).best_hours == [14, 5]


def test_fill_window_medians_are_numpy_medians_hour_by_hour():
    # The hint sorts once by hour and value; each hour's median must be exactly what
    # np.median of that hour's values gives (odd and even counts, ties, empty hours), and
    # each hour's count the sum of the counts behind its values.
    rng = np.random.default_rng(6)
    seconds = np.sort(rng.integers(0, 7 * 86400, 900)).astype(float)
    seconds = seconds[(seconds // 3600) % 24 != 3]  # 03 UTC left empty
    values = np.round(rng.normal(1.8, 0.4, seconds.size), 2)  # rounded: ties happen
    counts = rng.integers(1, 16, seconds.size)
    times = (seconds * 1e6).astype("datetime64[us]")
    hint = fill_window_hint(times, values, timezone="UTC", counts=counts, best=24)
    hours = (seconds // 3600).astype(int) % 24
    for hour in range(24):
        in_hour = hours == hour
        if hour == 3:
            assert hint.hourly_median[hour] is None and hint.hourly_count[hour] == 0
            continue
        assert hint.hourly_median[hour] == float(np.median(values[in_hour]))
        assert hint.hourly_count[hour] == int(counts[in_hour].sum())
    assert 3 not in hint.best_hours and len(hint.best_hours) == 23


def test_batch_exposure_hand_worked():
    # Hourly predictions 2.0, 1.0, 0.5, 1.0, 2.0; floor 1.5; early window shortened to 2 h.
    #  0-1 h: 2.0->1.0: below 1.5 for 0.5 h; deficit triangle 0.5*0.5*0.5 = 0.125; below 1: 0.
    #  1-2 h: 1.0->0.5: below 1.5 1 h; deficit trapezoid (0.5+1.0)/2*1 = 0.75; below 1: 1 h.
    #  2-3 h: mirror of 1-2 h.  3-4 h: mirror of 0-1 h.
    start = T0
    times = [start + timedelta(hours=h) for h in range(5)]
    omega = [2.0, 1.0, 0.5, 1.0, 2.0]
    exp = batch_exposure(times, omega, started_at=start, ended_at=start + timedelta(hours=4),
                         floor=1.5, max_gap=timedelta(hours=2), early_window=timedelta(hours=2))
    assert exp.hours_below_floor_run == pytest.approx(3.0)
    assert exp.hours_below_1_run == pytest.approx(2.0)
    assert exp.deficit_omega_hours_run == pytest.approx(1.75)
    assert exp.covered_hours_run == pytest.approx(4.0)
    assert exp.hours_below_floor_first_48h == pytest.approx(1.5)
    assert exp.hours_below_1_first_48h == pytest.approx(1.0)
    assert exp.deficit_omega_hours_first_48h == pytest.approx(0.875)
    assert exp.first_window_hours == pytest.approx(2.0)
    assert exp.minimum_omega == pytest.approx(0.5)


def test_batch_exposure_default_48h_window_over_three_days():
    # Constant 1.2 every 30 min for 72 h, floor 1.5: 48 h and 72 h below the floor, none
    # below 1; deficit 0.3 * 48 = 14.4 and 0.3 * 72 = 21.6 omega-hours. A 30-min spacing
    # equals the default limit and is bridged.
    start = T0
    times = [start + timedelta(minutes=30 * k) for k in range(145)]
    exp = batch_exposure(times, [1.2] * len(times), started_at=start,
                         ended_at=start + timedelta(hours=72), floor=1.5)
    assert exp.hours_below_floor_first_48h == pytest.approx(48.0)
    assert exp.hours_below_floor_run == pytest.approx(72.0)
    assert exp.hours_below_1_run == 0.0
    assert exp.deficit_omega_hours_first_48h == pytest.approx(14.4)
    assert exp.deficit_omega_hours_run == pytest.approx(21.6)


def test_batch_exposure_without_data_says_so():
    exp = batch_exposure([], [], started_at=T0, ended_at=T0 + timedelta(hours=5), floor=1.5)
    assert exp.covered_hours_run == 0.0
    assert exp.minimum_omega is None
    assert exp.notes
    with pytest.raises(StatusInputError, match="floor"):
        batch_exposure([], [], started_at=T0, ended_at=T0, floor=0.0)
    with pytest.raises(StatusInputError, match="ended_at"):
        batch_exposure([], [], started_at=T0, ended_at=T0 - timedelta(hours=1), floor=1.5)


@pytest.mark.parametrize(
    "zone",
    # A spring-forward and a fall-back week, a half-hour zone with daylight saving and a
    # 45-minute zone (offsets from the IANA tz database that zoneinfo reads).
    ["America/Los_Angeles", "Australia/Adelaide", "Asia/Kathmandu", "UTC"],
)
@pytest.mark.parametrize("first_day", [date(2026, 3, 5), date(2026, 10, 29)])
def test_local_hours_match_the_time_zone_database(zone, first_day):
    """The day-at-a-time offset look-up gives each quarter's clock hour as zoneinfo does."""
    from zoneinfo import ZoneInfo

    from app.status.compute import _local_hours

    start = datetime.combine(first_day, datetime.min.time(), tzinfo=UTC).timestamp()
    quarters = start + 900.0 * np.arange(4 * 24 * 10)
    expected = [datetime.fromtimestamp(q, tz=ZoneInfo(zone)).hour for q in quarters]
    assert _local_hours(quarters, ZoneInfo(zone)).tolist() == expected


def test_interval_and_completeness_the_same_in_time_order_or_not():
    # Times already in order skip the sort; shuffled, repeated or out-of-order times must
    # give the same figures. Hand check: readings every 2 minutes over the first hour of a
    # 2-hour window with 1-minute slots fill 30 of 120 slots (25 %); the median spacing is
    # 2 minutes.
    start, end = T0, T0 + timedelta(hours=2)
    ordered = np.array([np.datetime64("2026-06-01T12:00") + np.timedelta64(2 * i, "m")
                        for i in range(30)], dtype="datetime64[us]")
    shuffled = np.random.default_rng(2).permutation(np.concatenate([ordered, ordered[:5]]))
    for times in (ordered, shuffled):
        assert infer_sampling_interval(times) == timedelta(minutes=2)
        assert completeness_percent(times, start=start, end=end,
                                    expected_interval=timedelta(minutes=1)) == 25.0
    # Two readings in one slot count once, in order too.
    doubled = np.sort(np.concatenate([ordered, ordered + np.timedelta64(10, "s")]))
    assert completeness_percent(doubled, start=start, end=end,
                                expected_interval=timedelta(minutes=1)) == 25.0
    assert infer_sampling_interval(doubled[:1]) is None
