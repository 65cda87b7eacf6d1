"""Property tests of the alert rule state machine (pure; no database).

The expected behaviour is the one the hatchery manager asked for: one mail when an
excursion becomes active, one when it clears, nothing while pending, nothing new while
the value wanders between the level and the clear level, reminders only every
``repeat_minutes``.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from app.alerts.state_machine import (
    AlertState,
    Direction,
    NotificationKind,
    Observation,
    Phase,
    RuleState,
    Thresholds,
    Zone,
    acknowledge,
    classify,
    run,
    step,
    tick,
)

T0 = datetime(2026, 6, 1, 5, 0, tzinfo=UTC)

# An omega aragonite floor of 1.5 with a clear level of 1.7 (values chosen for the test).
OMEGA_RULE = dict(direction=Direction.BELOW, level=1.5, clear_level=1.7)

values_near_the_thresholds = st.sampled_from([1.2, 1.45, 1.5, 1.55, 1.6, 1.69, 1.7, 1.9, 2.5])
series = st.lists(
    st.tuples(st.integers(min_value=1, max_value=40), values_near_the_thresholds),
    min_size=0,
    max_size=60,
)
rule_timing = st.tuples(
    st.sampled_from([0, 5, 15, 30]),  # hold_minutes
    st.sampled_from([0, 10, 60]),  # repeat_minutes
)


def _observations(thresholds, steps):
    at = T0
    result = []
    for gap, value in steps:
        at = at + timedelta(minutes=gap)
        result.append((at, value, classify(thresholds, value)))
    return result


def _feed(thresholds, observations):
    state = RuleState()
    per_observation = []
    for at, _value, zone in observations:
        outcome = step(thresholds, state, Observation(at=at, zone=zone))
        per_observation.append(outcome)
        state = outcome.state
    return state, per_observation


def _expected_raise_times(thresholds, observations):
    """A second, declarative reading of the rule: when must a 'raised' mail go out?

    An excursion is raised at the first breach observation whose unbroken run of breach
    observations has lasted hold_minutes, unless an earlier excursion is still open (raised
    and not yet followed by a safe observation).
    """
    raise_times = []
    open_excursion = False
    run_start = None
    for at, _value, zone in observations:
        if zone is Zone.SAFE:
            open_excursion = False
        if zone is not Zone.BREACH:
            run_start = None
        elif run_start is None:
            run_start = at
        if open_excursion or run_start is None:
            continue
        if (at - run_start) >= timedelta(minutes=thresholds.hold_minutes):
            raise_times.append(at)
            open_excursion = True
            run_start = None
    return raise_times


@settings(max_examples=300, deadline=None)
@given(steps=series, timing=rule_timing)
def test_one_raised_and_one_cleared_per_excursion(steps, timing):
    hold, repeat = timing
    thresholds = Thresholds(**OMEGA_RULE, hold_minutes=hold, repeat_minutes=repeat)
    observations = _observations(thresholds, steps)
    final_state, outcomes = _feed(thresholds, observations)

    notifications = [n for outcome in outcomes for n in outcome.notifications]
    kinds = "".join({"raised": "R", "reminder": "M", "cleared": "C"}[n.kind] for n in notifications)
    # Notifications of one excursion: raised, any reminders, cleared; never two raised in a row.
    assert re.fullmatch(r"(RM*C)*(RM*)?", kinds), kinds

    raised_at = [n.at for n in notifications if n.kind is NotificationKind.RAISED]
    assert raised_at == _expected_raise_times(thresholds, observations)

    zone_at = {at: zone for at, _value, zone in observations}
    for notification in notifications:
        if notification.kind is NotificationKind.CLEARED:
            assert zone_at[notification.at] is Zone.SAFE
        else:
            assert zone_at[notification.at] is not Zone.SAFE

    # Still open at the end exactly when the last notification is not a 'cleared'.
    still_open = final_state.phase in (Phase.ACTIVE, Phase.ACKNOWLEDGED)
    assert still_open == (kinds != "" and not kinds.endswith("C"))


@settings(max_examples=300, deadline=None)
@given(steps=series, timing=rule_timing)
def test_nothing_is_sent_while_pending(steps, timing):
    hold, repeat = timing
    thresholds = Thresholds(**OMEGA_RULE, hold_minutes=hold, repeat_minutes=repeat)
    state = RuleState()
    for at, _value, zone in _observations(thresholds, steps):
        outcome = step(thresholds, state, Observation(at=at, zone=zone))
        if outcome.state.phase is Phase.PENDING:
            assert outcome.notifications == ()
        if state.phase is Phase.PENDING and outcome.state.phase is Phase.WATCHING:
            # The condition did not hold: the pending alert lapses silently.
            assert outcome.notifications == ()
            assert [t.to_state for t in outcome.transitions] == [AlertState.LAPSED]
        state = outcome.state


@settings(max_examples=300, deadline=None)
@given(
    prefix=series,
    band_steps=st.lists(
        st.tuples(st.integers(1, 40), st.sampled_from([1.5, 1.55, 1.6, 1.65, 1.69])),
        min_size=1,
        max_size=40,
    ),
    hold=st.sampled_from([0, 5, 15]),
)
def test_wandering_inside_the_band_sends_nothing_new(prefix, band_steps, hold):
    # With reminders off, values between the level and the clear level change nothing.
    thresholds = Thresholds(**OMEGA_RULE, hold_minutes=hold, repeat_minutes=0)
    observations = _observations(thresholds, prefix)
    state, _ = _feed(thresholds, observations)
    start = observations[-1][0] if observations else T0
    band = [
        (start + timedelta(minutes=sum(g for g, _ in band_steps[: i + 1])), value)
        for i, (_, value) in enumerate(band_steps)
    ]
    for at, value in band:
        assert classify(thresholds, value) is Zone.BAND
        outcome = step(thresholds, state, Observation(at=at, zone=Zone.BAND))
        assert outcome.notifications == ()
        if state.phase in (Phase.ACTIVE, Phase.ACKNOWLEDGED, Phase.WATCHING):
            assert outcome.state.phase is state.phase
            assert outcome.transitions == ()
        state = outcome.state


@settings(max_examples=300, deadline=None)
@given(
    gaps=st.lists(st.integers(1, 45), min_size=1, max_size=60),
    repeat=st.sampled_from([0, 10, 30, 60]),
)
def test_reminders_only_every_repeat_minutes(gaps, repeat):
    thresholds = Thresholds(**OMEGA_RULE, hold_minutes=0, repeat_minutes=repeat)
    at = T0
    outcome = step(thresholds, RuleState(), Observation(at=at, zone=Zone.BREACH))
    assert [n.kind for n in outcome.notifications] == [NotificationKind.RAISED]
    state = outcome.state
    last_sent = at
    for gap in gaps:
        at = at + timedelta(minutes=gap)
        zone = Zone.BREACH if gap % 2 else Zone.BAND  # still active either way
        outcome = step(thresholds, state, Observation(at=at, zone=zone))
        due = repeat > 0 and at - last_sent >= timedelta(minutes=repeat)
        expected = [NotificationKind.REMINDER] if due else []
        assert [n.kind for n in outcome.notifications] == expected
        if due:
            last_sent = at
        state = outcome.state


def test_acknowledged_alert_stops_reminding_and_still_clears_once():
    thresholds = Thresholds(**OMEGA_RULE, hold_minutes=0, repeat_minutes=10)
    state = step(thresholds, RuleState(), Observation(T0, Zone.BREACH)).state
    state = acknowledge(state)
    later = step(thresholds, state, Observation(T0 + timedelta(minutes=30), Zone.BREACH))
    assert later.notifications == ()
    assert tick(thresholds, later.state, T0 + timedelta(minutes=90)).notifications == ()
    cleared = step(thresholds, later.state, Observation(T0 + timedelta(minutes=40), Zone.SAFE))
    assert [n.kind for n in cleared.notifications] == [NotificationKind.CLEARED]
    assert [t.to_state for t in cleared.transitions] == [AlertState.CLEARED]
    assert cleared.state.phase is Phase.WATCHING


def test_hold_time_counts_from_the_first_breach():
    thresholds = Thresholds(**OMEGA_RULE, hold_minutes=15)
    observations = [Observation(T0 + timedelta(minutes=5 * i), Zone.BREACH) for i in range(5)]
    result = run(thresholds, RuleState(), observations)
    # Readings at 0, 5, 10, 15, 20 minutes: active at 15 minutes, not before.
    assert [(n.at - T0, n.kind) for n in result.notifications] == [
        (timedelta(minutes=15), NotificationKind.RAISED)
    ]
    assert result.state.since == T0


def test_condition_start_given_by_the_caller_counts_towards_the_hold():
    # A silent station: silence began at its last reading, 40 minutes before the sweep.
    thresholds = Thresholds(Direction.ABOVE, level=0.5, clear_level=0.5, hold_minutes=30)
    sweep_at = T0 + timedelta(minutes=40)
    result = step(thresholds, RuleState(), Observation(sweep_at, Zone.BREACH, started_at=T0))
    assert [n.kind for n in result.notifications] == [NotificationKind.RAISED]
    assert result.state.since == T0


def test_late_observation_is_ignored():
    thresholds = Thresholds(**OMEGA_RULE)
    state = step(thresholds, RuleState(), Observation(T0, Zone.BREACH)).state
    late = step(thresholds, state, Observation(T0 - timedelta(minutes=5), Zone.SAFE))
    assert late.state == state
    assert late.notifications == ()


def test_probability_decides_when_min_probability_is_set():
    thresholds = Thresholds(**OMEGA_RULE, min_probability=0.8)
    assert classify(thresholds, 1.45, probability_beyond=0.6) is Zone.BAND
    assert classify(thresholds, 1.45, probability_beyond=0.85) is Zone.BREACH
    assert classify(thresholds, 1.8, probability_beyond=0.01) is Zone.SAFE


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        (dict(direction=Direction.BELOW, level=1.5, clear_level=1.4), "clear_level"),
        (dict(direction=Direction.ABOVE, level=1000, clear_level=1100), "clear_level"),
        (dict(direction=Direction.BELOW, level=1.5, clear_level=1.7, hold_minutes=-1), "hold"),
        (
            dict(direction=Direction.BELOW, level=1.5, clear_level=1.7, min_probability=1.5),
            "min_probability",
        ),
        (dict(direction=Direction.BELOW, level=float("nan"), clear_level=1.7), "level"),
    ],
)
def test_bad_thresholds_are_refused_with_the_field_named(kwargs, field):
    with pytest.raises(ValueError, match=field):
        Thresholds(**kwargs)
