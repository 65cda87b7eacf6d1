"""The alert rule state machine: pure functions, no database, no clock.

One rule watches one series of observations. Each observation is first sorted into
a *zone* against the rule's two thresholds:

* ``breach``: on the bad side of ``level`` (or, when the rule has ``min_probability``,
  the probability of being on the bad side reaches it);
* ``safe``: on the safe side of ``clear_level`` (inclusive);
* ``band``: anything in between (hysteresis: nothing changes there).

The rule then moves through these phases::

    watching --breach--> pending --breach held for hold_minutes--> active
    pending  --band or safe--> watching            (alert lapses, nothing is sent)
    active / acknowledged --safe--> watching        (alert clears, one "cleared" mail)
    active --repeat_minutes elapsed--> active       (one "reminder" mail)

Exactly one "raised" notification is emitted per excursion (when it becomes active) and
exactly one "cleared" notification when it ends; nothing is sent while pending, nothing
new while the value wanders inside the band, and reminders only every ``repeat_minutes``
while active and not yet acknowledged (acknowledging an alert means someone is on it).

Observations older than the last one the rule has seen are ignored: a late, back-filled
reading does not rewrite what was already decided and mailed.
"""

from __future__ import annotations

import dataclasses
import enum
import math
from collections.abc import Iterable
from datetime import datetime, timedelta


class Direction(enum.StrEnum):
    BELOW = "below"
    ABOVE = "above"


class Zone(enum.StrEnum):
    BREACH = "breach"
    BAND = "band"
    SAFE = "safe"


class Phase(enum.StrEnum):
    """Where a rule stands. ``watching`` has no open alert; the others name the open alert."""

    WATCHING = "watching"
    PENDING = "pending"
    ACTIVE = "active"
    ACKNOWLEDGED = "acknowledged"


class AlertState(enum.StrEnum):
    """States an alert row goes through. ``lapsed``: pending, but the condition did not hold."""

    PENDING = "pending"
    ACTIVE = "active"
    ACKNOWLEDGED = "acknowledged"
    CLEARED = "cleared"
    LAPSED = "lapsed"


OPEN_ALERT_STATES = (AlertState.PENDING, AlertState.ACTIVE, AlertState.ACKNOWLEDGED)


class NotificationKind(enum.StrEnum):
    RAISED = "raised"
    REMINDER = "reminder"
    CLEARED = "cleared"


@dataclasses.dataclass(frozen=True, slots=True)
class Thresholds:
    """The part of a rule the state machine needs.

    ``level`` and ``clear_level`` are in the unit of the watched metric. ``clear_level``
    must be on the safe side of ``level`` or equal to it (equal means no hysteresis band).
    ``min_probability`` in (0, 1] makes the breach test probabilistic.
    """

    direction: Direction
    level: float
    clear_level: float
    hold_minutes: float = 0.0
    repeat_minutes: float = 0.0
    min_probability: float | None = None

    def __post_init__(self) -> None:
        for name in ("level", "clear_level", "hold_minutes", "repeat_minutes"):
            if not math.isfinite(getattr(self, name)):
                raise ValueError(f"{name} must be a finite number, got {getattr(self, name)!r}")
        if self.hold_minutes < 0:
            raise ValueError(f"hold_minutes must be 0 or more, got {self.hold_minutes}")
        if self.repeat_minutes < 0:
            raise ValueError(f"repeat_minutes must be 0 (never) or more, got {self.repeat_minutes}")
        if self.direction is Direction.BELOW and self.clear_level < self.level:
            raise ValueError(
                f"clear_level ({self.clear_level}) must be at or above level ({self.level}) "
                "for a 'below' rule: it is the safe side"
            )
        if self.direction is Direction.ABOVE and self.clear_level > self.level:
            raise ValueError(
                f"clear_level ({self.clear_level}) must be at or below level ({self.level}) "
                "for an 'above' rule: it is the safe side"
            )
        if self.min_probability is not None and not 0.0 < self.min_probability <= 1.0:
            raise ValueError(f"min_probability must be in (0, 1], got {self.min_probability}")


def classify(thresholds: Thresholds, value: float, probability_beyond: float | None = None) -> Zone:
    """Sort one value into breach, band or safe.

    Parameters
    ----------
    value
        The observed (or predicted) value, in the metric's unit.
    probability_beyond
        Probability that the true value is on the bad side of ``level`` (below it for a
        'below' rule). Used only when the rule sets ``min_probability``; when it is missing
        the point value decides.
    """
    if thresholds.direction is Direction.BELOW:
        beyond = value < thresholds.level
        safe = value >= thresholds.clear_level
    else:
        beyond = value > thresholds.level
        safe = value <= thresholds.clear_level
    if thresholds.min_probability is not None and probability_beyond is not None:
        beyond = probability_beyond >= thresholds.min_probability
    if beyond:
        return Zone.BREACH
    if safe:
        return Zone.SAFE
    return Zone.BAND


@dataclasses.dataclass(frozen=True, slots=True)
class RuleState:
    """What the machine remembers between observations.

    ``since``: when the current excursion's condition began (pending start);
    ``raised_at``: when it became active; ``last_notified_at``: the last raised or reminder
    notification; ``last_observed_at``: the newest observation time seen.
    """

    phase: Phase = Phase.WATCHING
    since: datetime | None = None
    raised_at: datetime | None = None
    last_notified_at: datetime | None = None
    last_observed_at: datetime | None = None


@dataclasses.dataclass(frozen=True, slots=True)
class Observation:
    """One input to the machine.

    ``started_at`` lets the caller say the condition began before ``at`` (a silent
    sensor's silence begins at its last reading); it is used only when a new excursion starts.
    """

    at: datetime
    zone: Zone
    started_at: datetime | None = None


@dataclasses.dataclass(frozen=True, slots=True)
class Transition:
    """The open alert moved from one state to another (``None``: no alert row before/after)."""

    at: datetime
    from_state: AlertState | None
    to_state: AlertState


@dataclasses.dataclass(frozen=True, slots=True)
class Notification:
    at: datetime
    kind: NotificationKind


@dataclasses.dataclass(frozen=True, slots=True)
class StepResult:
    state: RuleState
    transitions: tuple[Transition, ...] = ()
    notifications: tuple[Notification, ...] = ()


_PHASE_TO_ALERT_STATE = {
    Phase.PENDING: AlertState.PENDING,
    Phase.ACTIVE: AlertState.ACTIVE,
    Phase.ACKNOWLEDGED: AlertState.ACKNOWLEDGED,
}


def _minutes(delta: timedelta) -> float:
    return delta.total_seconds() / 60.0


def _reminder_due(thresholds: Thresholds, state: RuleState, at: datetime) -> bool:
    return (
        state.phase is Phase.ACTIVE
        and thresholds.repeat_minutes > 0
        and state.last_notified_at is not None
        and _minutes(at - state.last_notified_at) >= thresholds.repeat_minutes
    )


def step(thresholds: Thresholds, state: RuleState, observation: Observation) -> StepResult:
    """Advance the rule by one observation; return the new state and what to emit."""
    at = observation.at
    if state.last_observed_at is not None and at <= state.last_observed_at:
        return StepResult(state=state)
    transitions: list[Transition] = []
    notifications: list[Notification] = []
    zone = observation.zone
    phase = state.phase
    new = dataclasses.replace(state, last_observed_at=at)

    if phase is Phase.WATCHING:
        if zone is Zone.BREACH:
            since = observation.started_at if observation.started_at is not None else at
            since = min(since, at)
            new = dataclasses.replace(new, phase=Phase.PENDING, since=since)
            transitions.append(Transition(at, None, AlertState.PENDING))
            phase = Phase.PENDING
        else:
            return StepResult(state=new)

    if phase is Phase.PENDING:
        if zone is not Zone.BREACH:
            transitions.append(Transition(at, AlertState.PENDING, AlertState.LAPSED))
            return StepResult(state=RuleState(last_observed_at=at), transitions=tuple(transitions))
        assert new.since is not None
        if _minutes(at - new.since) >= thresholds.hold_minutes:
            new = dataclasses.replace(new, phase=Phase.ACTIVE, raised_at=at, last_notified_at=at)
            transitions.append(Transition(at, AlertState.PENDING, AlertState.ACTIVE))
            notifications.append(Notification(at, NotificationKind.RAISED))
        return StepResult(new, tuple(transitions), tuple(notifications))

    # active or acknowledged
    if zone is Zone.SAFE:
        transitions.append(Transition(at, _PHASE_TO_ALERT_STATE[phase], AlertState.CLEARED))
        notifications.append(Notification(at, NotificationKind.CLEARED))
        return StepResult(RuleState(last_observed_at=at), tuple(transitions), tuple(notifications))
    if _reminder_due(thresholds, new, at):
        new = dataclasses.replace(new, last_notified_at=at)
        notifications.append(Notification(at, NotificationKind.REMINDER))
    return StepResult(new, tuple(transitions), tuple(notifications))


def tick(thresholds: Thresholds, state: RuleState, at: datetime) -> StepResult:
    """Advance the clock without an observation: only reminders can come out of this.

    The sweep calls it so that an active alert on a station that stopped reporting still
    reminds. It does not move ``last_observed_at``.
    """
    if _reminder_due(thresholds, state, at):
        new = dataclasses.replace(state, last_notified_at=at)
        return StepResult(new, (), (Notification(at, NotificationKind.REMINDER),))
    return StepResult(state=state)


def acknowledge(state: RuleState) -> RuleState:
    """An operator has seen the active alert: stop reminders, keep waiting for the clear."""
    if state.phase is not Phase.ACTIVE:
        raise ValueError(f"only an active alert can be acknowledged, this one is {state.phase}")
    return dataclasses.replace(state, phase=Phase.ACKNOWLEDGED)


def run(
    thresholds: Thresholds, state: RuleState, observations: Iterable[Observation]
) -> StepResult:
    """Feed several observations in time order; collect every transition and notification."""
    transitions: list[Transition] = []
    notifications: list[Notification] = []
    for observation in sorted(observations, key=lambda o: o.at):
        result = step(thresholds, state, observation)
        state = result.state
        transitions.extend(result.transitions)
        notifications.extend(result.notifications)
    return StepResult(state, tuple(transitions), tuple(notifications))
