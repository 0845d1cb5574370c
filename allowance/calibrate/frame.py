"""The frame of a calibration: its month axis and segments, and each partition seen through it.

:class:`Frame` is decided once from the history's profile and the settings: the as-of month,
the window, each segment's charge-off point, which segments are revolving, and the PD
source each gets. :class:`MonthView` is one partition of the loan-month panel through that
frame: rows after the as-of month dropped, every row's delinquency state, the state of the
month before, each loan's exit, and each row's loan age. Every estimator reads a
``MonthView``; none reads files.

Implements
----------
Frame       the month axis, the window, and per-segment policy (charge-off point, revolving, PD source)
MonthView   one partition through the frame: states, transitions, exits, ages
month_label ``YYYY-MM`` of a month index
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from allowance.calibrate.settings import CalibrationSettings, Choice, LossRateChoice, PdSourceChoice
from allowance.calibrate.states import AFTER_EXIT, CHARGE_OFF, PAID_OFF, first_exit, month_states
from allowance.exceptions import HistoryError
from allowance.intake.panel import NO_MONTH, LoanMonths, LoanMonthPanel


def month_label(month: int) -> str:
    """``YYYY-MM`` of a month index (months since 1970-01).

    Examples
    --------
    >>> month_label(680)
    '2026-09'
    """
    return str(np.datetime64(int(month), "M"))


def month_index(text: str) -> int:
    """Months since 1970-01 of a ``YYYY-MM`` or ``YYYY-MM-DD`` text.

    Examples
    --------
    >>> month_index("2026-09-30"), month_index("2026-09")
    (680, 680)
    """
    return int(np.datetime64(text[:7], "M").astype(np.int64))


@dataclass(frozen=True)
class Frame:
    """The month axis, the window and the per-segment policy of a calibration.

    Attributes
    ----------
    segments, grades : tuple of str
        The texts behind the panel's codes.
    first_month, as_of : int
        The history's first month and the as-of month (months since 1970-01).
    window_start : int
        First month of the window: transitions *into* months ``window_start..as_of`` are pooled.
    charge_off_dpd : ndarray of int
        Charge-off point per segment code.
    revolving : ndarray of bool
        Segments whose rows carry a credit limit.
    pd_source : tuple of str
        The PD source chosen per segment code, or the loss-rate method that replaces it.
    has : frozenset of str
        The optional panel columns the history has.
    choices : list of Choice
        The per-segment choices, stated.
    """

    segments: tuple[str, ...]
    grades: tuple[str, ...]
    first_month: int
    as_of: int
    window_start: int
    charge_off_dpd: np.ndarray
    revolving: np.ndarray
    pd_source: tuple[PdSourceChoice | LossRateChoice, ...]
    has: frozenset[str]
    settings: CalibrationSettings
    rows_after_as_of: int = 0
    choices: list[Choice] = field(default_factory=list)

    @property
    def months(self) -> int:
        """Months on the axis: ``first_month..as_of``."""
        return self.as_of - self.first_month + 1

    @property
    def window(self) -> tuple[str, str]:
        return month_label(self.window_start), month_label(self.as_of)

    def segment_index(self, name: str) -> int:
        return self.segments.index(name)


def build_frame(panel: LoanMonthPanel, first_month: str, last_month: str, settings: CalibrationSettings,
                given: set[str]) -> Frame:
    """Decide the frame from the history's profile and the settings (choices recorded)."""
    first, last = month_index(first_month), month_index(last_month)
    as_of = last if settings.as_of is None else month_index(settings.as_of.isoformat())
    if as_of < first:
        raise HistoryError(
            f"the as-of month {month_label(as_of)} is before the history's first month {month_label(first)}",
            hint="give an as-of date within the history",
        )
    window_start = max(first + 1, as_of - settings.window_months + 1)
    profile = panel.profile
    segments = tuple(panel.segments)
    unknown = [s for s in (*settings.charge_off_dpd, *settings.pd_source, *settings.loss_rate_method)
               if s not in segments]
    if unknown:
        raise HistoryError(
            f"the settings name segment {unknown[0]!r}, which the history does not have",
            hint=f"the history's segments are {', '.join(segments)}",
        )
    choices = [
        Choice("as_of", month_label(as_of), "given" if settings.as_of else "default",
               "rows after this month are not used" + ("" if settings.as_of else " (the history's last month)")),
        Choice("window", f"{month_label(window_start)} to {month_label(as_of)}", "derived",
               f"window_months = {settings.window_months}, within the history"),
    ]
    dpd, revolving, sources = [], [], []
    for s, name in enumerate(segments):
        rows = int(profile.rows[s]) if s < len(profile.rows) else 0
        limit = int(profile.with_limit[s]) if s < len(profile.with_limit) else 0
        is_revolving = rows > 0 and limit >= rows / 2
        revolving.append(is_revolving)
        if name in settings.charge_off_dpd:
            point, source, why = settings.charge_off_dpd[name], "given", "stated in the settings"
        else:
            point = 180 if is_revolving else 120
            source = "default"
            why = ("revolving line (its rows carry a credit_limit): 180 days past due" if is_revolving
                   else "closed-end loan: 120 days past due") + " (common practice for US retail credit)"
        dpd.append(point)
        choices.append(Choice(f"segments.{name}.charge_off_dpd", str(point), source, why))
        grade_share = profile.with_grade[s] / rows if s < len(profile.with_grade) and rows else 0.0
        orig_share = profile.with_origination[s] / rows if s < len(profile.with_origination) and rows else 0.0
        if name in settings.pd_source:
            pd_source, source, why = settings.pd_source[name], "given", "stated in the settings"
        elif is_revolving:
            pd_source, source, why = "transition_matrix", "default", "revolving: roll rates between delinquency buckets"
        elif grade_share >= 0.5:
            pd_source, source, why = "pd_12m_by_grade", "default", "the history grades its loans"
        elif orig_share >= 0.5:
            pd_source, source, why = "pd_curve_by_age", "default", "the history dates its loans: PD by loan age"
        else:
            pd_source, source, why = "pd_12m", "default", "no grades or origination dates: one 12-month PD"
        needs = {"pd_12m_by_grade": (grade_share, "grade"), "pd_curve_by_age": (orig_share, "origination_date")}
        if pd_source in needs and needs[pd_source][0] == 0:
            raise HistoryError(
                f"segment {name!r} is to take {pd_source}, but its rows have no {needs[pd_source][1]}",
                hint="choose another PD source for it, or add the column to the history",
            )
        if name in settings.loss_rate_method:
            method = settings.loss_rate_method[name]
            if method == "vintage_loss_curve" and is_revolving:
                raise HistoryError(
                    f"segment {name!r} is revolving (its rows carry a credit_limit); a vintage loss curve needs "
                    "loans with an original balance",
                    hint="choose annual_loss_rate or lifetime_loss_rate for it",
                )
            pd_source, source, why = method, "given", "a loss-rate method, stated in the settings (no PD source)"
        sources.append(pd_source)
        choices.append(Choice(f"segments.{name}.pd_source", pd_source, source, why))
    return Frame(
        segments=segments, grades=tuple(panel.grades), first_month=first, as_of=as_of,
        window_start=window_start, charge_off_dpd=np.asarray(dpd, np.int64),
        revolving=np.asarray(revolving, bool), pd_source=tuple(sources), has=frozenset(panel.names),
        settings=settings, choices=choices,
    )


@dataclass(frozen=True)
class MonthView:
    """One partition through the frame (rows up to the as-of month only).

    Attributes
    ----------
    part : LoanMonths
        The partition's rows and events, cut at the as-of month.
    state : ndarray of int8
        Every row's state (:mod:`~allowance.calibrate.states`).
    follows : ndarray of bool
        The row before is the same loan's previous month: a one-month transition ends here.
    before : ndarray of int
        Position of the row before (valid where ``follows``).
    exit_row, exit_state : ndarray of int
        Each row's loan: the position and state of its first exit (``-1``: none by the as-of month).
    age : ndarray of int
        Months since origination at the row's month end (``-1`` unknown).
    t : ndarray of int
        The row's month on the frame's axis (0 = the first month).
    active : ndarray of bool
        Rows in a delinquency bucket (on the book at the month end).
    transition : ndarray of bool
        Rows that end a one-month transition from a bucket (the row before was on the book).
    new_loan : ndarray of bool
        The first row of each loan.
    """

    frame: Frame
    part: LoanMonths
    state: np.ndarray
    follows: np.ndarray
    before: np.ndarray
    exit_row: np.ndarray
    exit_state: np.ndarray
    age: np.ndarray
    t: np.ndarray
    active: np.ndarray
    transition: np.ndarray
    new_loan: np.ndarray

    @property
    def segment(self) -> np.ndarray:
        return self.part.segment

    @property
    def in_window(self) -> np.ndarray:
        return self.t >= self.frame.window_start - self.frame.first_month


def _cut(part: LoanMonths, as_of: int) -> tuple[LoanMonths, int]:
    keep = part.month <= as_of
    dropped = int((~keep).sum())
    if not dropped:
        return part, 0
    events_keep = part.events["month"] <= as_of
    columns = {n: a[keep] for n, a in part.columns.items()}
    events = {n: a[events_keep] for n, a in part.events.items()}
    return LoanMonths(columns=columns, events=events), dropped


def month_view(part: LoanMonths, frame: Frame) -> tuple[MonthView, int]:
    """See a partition through the frame; returns the view and the rows dropped after the as-of month."""
    part, dropped = _cut(part, frame.as_of)
    point = frame.charge_off_dpd[part.segment.astype(np.int64)] if part.rows else np.zeros(0, np.int64)
    state = month_states(part.loan, part.dpd, part.flags, point)
    follows = part.follows
    before = np.arange(part.rows) - 1
    exit_row, exit_state = first_exit(part.loan, np.where(state == AFTER_EXIT, -1, state))
    origination = part.get("origination")
    if origination is None:
        age = np.full(part.rows, -1, dtype=np.int64)
    else:
        age = np.where(origination == NO_MONTH, -1, part.month.astype(np.int64) - origination)
        age = np.where(age < 0, -1, age)
    active = state < CHARGE_OFF
    transition = np.zeros(part.rows, dtype=bool)
    transition[follows] = active[before[follows]]
    transition &= state != AFTER_EXIT
    view = MonthView(frame=frame, part=part, state=state, follows=follows, before=before,
                     exit_row=exit_row, exit_state=exit_state, age=age,
                     t=part.month.astype(np.int64) - frame.first_month, active=active,
                     transition=transition, new_loan=part.new_loan)
    return view, dropped


__all__ = ["CHARGE_OFF", "PAID_OFF", "Frame", "MonthView", "build_frame", "month_index", "month_label", "month_view"]
