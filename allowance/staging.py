"""IFRS 9 staging, the default test used by both frameworks, and the horizon in months.

Implements
----------
assign_stages       IFRS 9 stage 1/2/3 per loan with the reason, the cure path and POCI
pd_ratio_coverage   per segment: how many loans the PD-ratio test could be applied to, and why not
pd_ratio_warnings   the run's warnings for loans and segments the PD-ratio test skips (said once)
lifetime_pd         lifetime PD over a number of months from a 12-month PD (constant hazard)
stage_class         the one stage vocabulary: "stage 1", "stage 2", "stage 3", "POCI"
stage_class_codes   the same as positions in STAGE_CLASSES (-1: no known stage), for grouping
in_default          the default test (days past due at the default threshold, defaulted, bankrupt)
loss_event_now      loans in default whose loss event is certain now (PD = 1, the LGD after cures)
lifetime_months     each loan's life: remaining term, or a revolving line's behavioural life
stage_horizon       IFRS 9: 12 months in stage 1 (or the life if shorter), else the life
lifetime_horizon    CECL: the life of every loan

Every rule is vectorised over the tape; the only Python loops run over segments or rule
codes, never over loans.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa

from allowance.exceptions import AssumptionsError, InvalidInputError
from allowance.schemas import Ifrs9Rules, SegmentAssumptions

__all__ = [
    "STAGE_CLASSES", "assign_stages", "in_default", "lifetime_horizon", "lifetime_months", "lifetime_pd", "loss_event_now",
    "pd_ratio_coverage", "pd_ratio_warnings", "stage_class", "stage_class_codes", "stage_horizon",
]

_SLACK = 1e-12

#: The reporting classes of IFRS 9, in the order every output shows them: stages 1-3 and
#: purchased or originated credit-impaired assets apart (IFRS 7 35H(c), 35M).
STAGE_CLASSES: tuple[str, ...] = ("stage 1", "stage 2", "stage 3", "POCI")


def in_default(tape: pd.DataFrame, default_dpd: int) -> np.ndarray:
    """Loans in default now: ``days_past_due >= default_dpd``, ``defaulted`` or ``bankrupt``.

    Both frameworks give these loans PD = 1 now; under IFRS 9 they are stage 3.

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraph B5.5.37 (the 90-days-past-due
       rebuttable presumption).

    Examples
    --------
    >>> tape = pd.DataFrame({"days_past_due": [0, 90, 10], "defaulted": [False, False, True],
    ...                      "bankrupt": [False, False, False]})
    >>> in_default(tape, 90).tolist()
    [False, True, True]
    """
    dpd = tape["days_past_due"].to_numpy()
    return (
        (dpd >= default_dpd)
        | tape["defaulted"].to_numpy(dtype=bool)
        | tape["bankrupt"].to_numpy(dtype=bool)
    )


def _segment_lookup(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions]) -> None:
    missing = ~tape["segment"].isin(list(segments)).to_numpy()
    if missing.any():
        first = int(np.flatnonzero(missing)[0])
        row = int(tape["source_row"].iloc[first]) if "source_row" in tape.columns else None
        name = tape["segment"].iloc[first]
        raise AssumptionsError(
            f"segment {name!r} on the tape has no [segments.{name}] table",
            row=row,
            column="segment",
            hint=f"add [segments.{name}] to the assumptions file or correct the tape",
        )


def _flag(tape: pd.DataFrame, column: str) -> np.ndarray:
    return tape[column].to_numpy(dtype=bool) if column in tape.columns else np.zeros(len(tape), bool)


def _number(tape: pd.DataFrame, column: str) -> np.ndarray:
    if column not in tape.columns:
        return np.full(len(tape), np.nan)
    return tape[column].to_numpy(dtype=float, na_value=np.nan)


def lifetime_pd(pd_12m, months) -> np.ndarray:
    r"""Probability of default within ``months`` months, from a 12-month PD at a constant hazard.

    Notes
    -----
    .. math:: PD_{life}(m) = 1 - (1 - PD_{12})^{m / 12}

    (survival is log-linear in time: the hazard is the same every month). Used by the
    lifetime PD-ratio test, which evaluates the PD now and the PD at initial recognition over
    the *same* remaining months, so that the comparison is like with like and a loan does
    not look safer merely because it has fewer months left (IFRS 9 B5.5.11).

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraphs 5.5.9 and B5.5.11.

    Examples
    --------
    >>> lifetime_pd([0.02, 0.02, 0.02], [12, 6, 36]).round(6).tolist()
    [0.02, 0.010051, 0.058808]
    """
    p = np.asarray(pd_12m, dtype=float)
    m = np.asarray(months, dtype=float)
    with np.errstate(divide="ignore"):
        return -np.expm1(np.log1p(-np.minimum(p, 1.0)) * m / 12.0)


def _low_credit_risk(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions], pd_now: np.ndarray) -> np.ndarray:
    """Per loan, at the reporting date: PD at or below the segment's threshold and/or grade listed."""
    out = np.zeros(len(tape), dtype=bool)
    segment = tape["segment"]
    grade = tape["grade"] if "grade" in tape.columns else pd.Series(pd.NA, index=tape.index)
    for name, seg in segments.items():
        if seg.low_credit_risk_pd is None and not seg.low_credit_risk_grades:
            continue
        low = (segment == name).to_numpy(dtype=bool, copy=True)
        if seg.low_credit_risk_pd is not None:
            # a loan without its own current PD cannot be shown to have low credit risk
            low &= ~np.isnan(pd_now) & (np.nan_to_num(pd_now, nan=1.0) <= seg.low_credit_risk_pd + _SLACK)
        if seg.low_credit_risk_grades:
            low &= grade.isin(seg.low_credit_risk_grades).to_numpy()
        out |= low
    return out


def _pd_ratio(pd_now: np.ndarray, pd_orig: np.ndarray, remaining: np.ndarray | None, rules: Ifrs9Rules) -> np.ndarray:
    """Where both PDs are known: the ratio and minimum-increase tests on the chosen measure."""
    known = ~np.isnan(pd_now) & ~np.isnan(pd_orig)
    now, orig = np.nan_to_num(pd_now), np.nan_to_num(pd_orig)
    if rules.sicr_pd_measure == "lifetime":
        now, orig = lifetime_pd(now, remaining), lifetime_pd(orig, remaining)
    # slack of 1e-12 so that a boundary the user states (3 % - 1 % >= 0.02) is met in floats
    return (
        known
        & (now >= rules.sicr_pd_ratio * orig - _SLACK)
        & (now - orig >= rules.sicr_min_pd_increase - _SLACK)
        & (now > orig)
    )


def assign_stages(
    tape: pd.DataFrame,
    rules: Ifrs9Rules,
    segments: dict[str, SegmentAssumptions],
    *,
    remaining_months=None,
) -> pd.DataFrame:
    r"""IFRS 9 stage of every loan, the reason for it, and whether it is POCI.

    Parameters
    ----------
    tape : DataFrame
        The accepted tape: ``segment, days_past_due, defaulted, bankrupt`` and, where
        present, ``grade, pd_12m_current, pd_12m_at_origination, watchlist, forborne,
        prior_stage, months_performing, credit_impaired_at_purchase``.
    rules : Ifrs9Rules
        The ``[ifrs9]`` table.
    segments : dict of SegmentAssumptions
        For the low-credit-risk tests.
    remaining_months : array_like of int, optional
        Remaining life in months per loan; required when ``rules.sicr_pd_measure`` is
        ``"lifetime"``.

    Returns
    -------
    DataFrame
        Index ``tape.index``; ``stage`` (int8), ``stage_reason`` (codes joined by ";"),
        ``poci`` (bool) and ``stage_class`` (:data:`STAGE_CLASSES`).

    Raises
    ------
    AssumptionsError
        A tape segment has no assumptions.

    Notes
    -----
    Stage 3: ``dpd>=D`` (days past due at or beyond ``default_dpd``), ``defaulted``,
    ``bankrupt``. Stage 2: ``dpd>B`` (beyond ``sicr_backstop_dpd``); ``watchlist`` and
    ``forborne`` where configured as SICR; ``pd_ratio``, the loan's own PD now against its own
    PD at initial recognition, on one scale:

    .. math:: PD_{now} \ge r \cdot PD_{orig}, \quad PD_{now} - PD_{orig} \ge \Delta_{min},
              \quad PD_{now} > PD_{orig}

    with :math:`PD_{now}` = ``pd_12m_current`` and :math:`PD_{orig}` =
    ``pd_12m_at_origination`` (``sicr_pd_measure = "12_month"``, B5.5.13), or both turned
    into lifetime PDs over the loan's remaining months by :func:`lifetime_pd`
    (``"lifetime"``, 5.5.9). A loan lacking either PD is not given the test (never a pool
    PD against a loan PD); :func:`pd_ratio_warnings` says so once per run.

    Low credit risk (5.5.10), tested per loan at the reporting date: ``pd_12m_current`` at or
    below the segment's ``low_credit_risk_pd`` and/or ``grade`` in its
    ``low_credit_risk_grades`` (both when both are given). The PD-ratio test is not applied
    to such a loan; one it would have moved stays in stage 1 with reason
    ``low_credit_risk``. Days past due and the flags still apply.

    Cure path 3 -> 2 -> 1. ``months_performing`` counts months performing since the loan
    entered its ``prior_stage`` (blank counts as 0). A loan whose prior stage is 3 and that
    now meets only a better stage stays in stage 3 while ``months_performing <
    probation_months_stage3`` (``probation_from_3``); once past it, it goes to stage 2, never
    straight to stage 1 (``cure_from_3``). A loan whose prior stage is 2 and that now meets
    only stage 1 stays in stage 2 while ``months_performing < probation_months_stage2``
    (``probation_from_2``).

    POCI (``credit_impaired_at_purchase``): always lifetime ECL and its own class; stage 3
    while a stage-3 trigger (or probation) holds, else stage 2; the reason starts with
    ``poci``.

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraphs 5.5.3, 5.5.5, 5.5.9, 5.5.10 (low credit
       risk), 5.5.11 (30 days past due), 5.5.13 (purchased or originated credit-impaired),
       B5.5.13 (12-month PD as an approximation), B5.5.22-B5.5.24 and B5.5.37 (90 days past
       due).

    Examples
    --------
    >>> from allowance.schemas import Ifrs9Rules, SegmentAssumptions
    >>> tape = pd.DataFrame({"segment": ["auto"] * 4, "days_past_due": [0, 45, 120, 0],
    ...                      "defaulted": False, "bankrupt": False, "watchlist": [True, False, False, False],
    ...                      "pd_12m_at_origination": 0.01, "pd_12m_current": [0.01, 0.01, 0.01, 0.03]})
    >>> rules = Ifrs9Rules(sicr_pd_ratio=2.0, sicr_pd_measure="12_month")
    >>> out = assign_stages(tape, rules, {"auto": SegmentAssumptions(pd_12m=0.02, lgd=0.4)})
    >>> out[["stage", "stage_reason"]].to_dict("list")
    {'stage': [2, 2, 3, 2], 'stage_reason': ['watchlist', 'dpd>30', 'dpd>=90', 'pd_ratio']}
    """
    n = len(tape)
    _segment_lookup(tape, segments)
    remaining = None
    if rules.sicr_pd_measure == "lifetime":
        if remaining_months is None:
            raise InvalidInputError("assign_stages: the lifetime PD-ratio test needs remaining_months")
        remaining = np.asarray(remaining_months, dtype=float)
        if remaining.shape != (n,):
            raise InvalidInputError(f"assign_stages: remaining_months must be {n} numbers, one per loan")

    dpd = tape["days_past_due"].to_numpy()
    pd_now = _number(tape, "pd_12m_current")
    pd_ratio = _pd_ratio(pd_now, _number(tape, "pd_12m_at_origination"), remaining, rules)
    exempt = _low_credit_risk(tape, segments, pd_now)

    # (code, mask) per trigger, in the order reasons are written
    stage3 = [
        (f"dpd>={rules.default_dpd}", dpd >= rules.default_dpd),
        ("defaulted", _flag(tape, "defaulted")),
        ("bankrupt", _flag(tape, "bankrupt")),
    ]
    stage2 = [
        (f"dpd>{rules.sicr_backstop_dpd}", dpd > rules.sicr_backstop_dpd),
        ("pd_ratio", pd_ratio & ~exempt),
        ("watchlist", _flag(tape, "watchlist") & rules.watchlist_is_sicr),
        ("forborne", _flag(tape, "forborne") & rules.forborne_is_sicr),
    ]
    any3 = np.logical_or.reduce([m for _, m in stage3])
    any2 = np.logical_or.reduce([m for _, m in stage2])
    current = np.where(any3, 3, np.where(any2, 2, 1))

    prior = _number(tape, "prior_stage")
    performing = np.nan_to_num(_number(tape, "months_performing"), nan=0.0)
    hold3 = (prior == 3) & (current < 3) & (performing < rules.probation_months_stage3)
    cure3 = (prior == 3) & (current < 2) & ~hold3
    hold2 = (prior == 2) & (current < 2) & (performing < rules.probation_months_stage2)
    stage = np.where(hold3, 3, np.where(cure3 | hold2, 2, current))

    poci = _flag(tape, "credit_impaired_at_purchase")
    stage = np.where(poci, np.maximum(stage, 2), stage)
    exempted = exempt & pd_ratio & (stage == 1)

    shown = [("poci", poci), ("probation_from_3", hold3), ("cure_from_3", cure3 & ~poci),
             ("probation_from_2", hold2 & ~poci)]
    shown += [(code, mask) for code, mask in stage3]
    shown += [(code, mask & (stage == 2)) for code, mask in stage2]
    shown += [("low_credit_risk", exempted), ("performing", (stage == 1) & ~exempted)]
    classes = stage_class_codes(stage, poci)  # -1 (no known stage): None, as stage_class gives
    return pd.DataFrame(
        {
            "stage": stage.astype(np.int8),
            "stage_reason": _join_codes([c for c, _ in shown], [m for _, m in shown], n),
            "poci": poci,
            "stage_class": _text([*STAGE_CLASSES, None], np.where(classes < 0, len(STAGE_CLASSES), classes)),
        },
        index=tape.index,
    )


def stage_class_codes(stage, poci) -> np.ndarray:
    """Each loan's position in :data:`STAGE_CLASSES` (``-1``: no known stage); POCI apart.

    Examples
    --------
    >>> stage_class_codes([1, 2, 3, 3, 0], [False, False, False, True, False]).tolist()
    [0, 1, 2, 3, -1]
    """
    stage = np.asarray(stage)
    known = np.isin(stage, (1, 2, 3))
    codes = np.where(known, np.where(known, stage, 1).astype(np.int64) - 1, -1)
    return np.where(np.asarray(poci, dtype=bool), 3, codes).astype(np.int64)


def stage_class(stage, poci) -> np.ndarray:
    """The one stage vocabulary of every output: ``stage 1/2/3``, and ``POCI`` apart.

    POCI assets are their own class whatever their stage (IFRS 7 35H(c), 35M): the console,
    ``run.json``, the workbook and the movement all use these labels.

    Examples
    --------
    >>> stage_class([1, 2, 3, 3], [False, False, False, True]).tolist()
    ['stage 1', 'stage 2', 'stage 3', 'POCI']
    """
    labels = np.array([*STAGE_CLASSES, None], dtype=object)  # -1: the last, None
    return labels[stage_class_codes(stage, poci)]


def pd_ratio_coverage(tape: pd.DataFrame) -> pd.DataFrame:
    """Per segment: loans, loans the PD-ratio test was applied to, and those it was not, by reason.

    A loan is tested when it carries both ``pd_12m_current`` and ``pd_12m_at_origination``
    (POCI loans are lifetime anyway and are not counted as untested).

    Examples
    --------
    >>> tape = pd.DataFrame({"segment": ["a", "a", "b"], "pd_12m_current": [0.01, np.nan, np.nan],
    ...                      "pd_12m_at_origination": [0.01, 0.01, 0.02]})
    >>> pd_ratio_coverage(tape).to_dict("records")  # doctest: +NORMALIZE_WHITESPACE
    [{'segment': 'a', 'loans': 2, 'tested': 1, 'no_current_pd': 1, 'no_origination_pd': 0},
     {'segment': 'b', 'loans': 1, 'tested': 0, 'no_current_pd': 1, 'no_origination_pd': 0}]
    """
    poci = _flag(tape, "credit_impaired_at_purchase")
    now = ~np.isnan(_number(tape, "pd_12m_current"))
    orig = ~np.isnan(_number(tape, "pd_12m_at_origination"))
    cols = ["segment", "loans", "tested", "no_current_pd", "no_origination_pd"]
    if not len(tape):
        return pd.DataFrame(columns=cols)
    # counts by segment code (a million loans' segment text is never turned into Python objects)
    codes, names = pd.factorize(tape["segment"], sort=True)
    known = codes >= 0

    def count(flags: np.ndarray) -> np.ndarray:
        return np.bincount(codes[known], weights=flags[known], minlength=len(names)).astype(np.int64)

    return pd.DataFrame({
        "segment": np.asarray(names, dtype=object),
        "loans": count(np.ones(len(tape))),
        "tested": count(now & orig),
        "no_current_pd": count(~now & ~poci),
        "no_origination_pd": count(now & ~orig & ~poci),
    })[cols]


def pd_ratio_warnings(tape: pd.DataFrame) -> list[str]:
    """What the run says, once, about loans the PD-ratio test could not be applied to.

    A segment with no loan-level current PD at all is named once; a segment where only some
    loans lack one PD or the other gets a count. Staging of those loans rests on days past
    due, the flags and probation.

    Examples
    --------
    >>> tape = pd.DataFrame({"segment": ["a", "a", "b"], "pd_12m_current": [0.01, np.nan, np.nan],
    ...                      "pd_12m_at_origination": [0.01, 0.01, 0.02]})
    >>> for line in pd_ratio_warnings(tape): print(line)
    IFRS 9 staging: the PD-ratio test is not applied to segment b (1 loan): it has no loan-level pd_12m_current on the tape, and a pool PD is not compared with a loan's PD; those loans are staged on days past due, the flags and probation
    IFRS 9 staging: the PD-ratio test is not applied to 1 of 2 loans of segment a (no pd_12m_current)
    """
    return pd_ratio_lines(pd_ratio_coverage(tape))


def pd_ratio_lines(cover: pd.DataFrame) -> list[str]:
    """:func:`pd_ratio_warnings` from a :func:`pd_ratio_coverage` table (of a whole book, or
    the sum of its parts' tables by segment)."""
    lines = []
    none = cover[(cover["tested"] == 0) & (cover["no_current_pd"] == cover["loans"])]
    if len(none):
        names = ", ".join(f"{s} ({n:,} loan{'s' if n != 1 else ''})" for s, n in zip(none["segment"], none["loans"]))
        plural = "s" if len(none) > 1 else ""
        lines.append(
            f"IFRS 9 staging: the PD-ratio test is not applied to segment{plural} {names}: "
            f"{'they have' if plural else 'it has'} no loan-level pd_12m_current on the tape, and a pool PD is not "
            "compared with a loan's PD; those loans are staged on days past due, the flags and probation"
        )
    rest = cover[~cover["segment"].isin(none["segment"]) & ((cover["no_current_pd"] + cover["no_origination_pd"]) > 0)]
    for r in rest.itertuples(index=False):
        why = [w for w, k in (("no pd_12m_current", r.no_current_pd), ("no pd_12m_at_origination", r.no_origination_pd)) if k]
        lines.append(
            f"IFRS 9 staging: the PD-ratio test is not applied to {r.no_current_pd + r.no_origination_pd:,} of "
            f"{r.loans:,} loans of segment {r.segment} ({', '.join(why)})"
        )
    return lines


def _join_codes(codes: list[str], masks: list[np.ndarray], n: int) -> pd.api.extensions.ExtensionArray:
    """Join the codes whose masks are true, per loan, via a bit pattern per loan (as text, :func:`_text`)."""
    bits = np.zeros(n, dtype=np.int64)
    for i, mask in enumerate(masks):
        bits |= mask.astype(np.int64) << i
    patterns, inverse = np.unique(bits, return_inverse=True)
    return _text([";".join(code for i, code in enumerate(codes) if int(p) >> i & 1) for p in patterns], inverse)


def _text(labels: list[str | None], codes: np.ndarray) -> pd.api.extensions.ExtensionArray:
    """``labels[codes]`` as pandas text (``str``, the type a frame gives a column of Python
    strings), taken by Arrow from the few labels: no Python string per loan to convert
    (a tenth of a second a million loans per column)."""
    return pd.array(pa.array(labels, pa.large_string()).take(pa.array(np.asarray(codes, dtype=np.int64))), dtype="str")


def lifetime_months(remaining_months, repayment, behavioural_life) -> np.ndarray:
    """Each loan's life in months: the remaining contractual term, or a revolving line's
    behavioural life.

    Parameters
    ----------
    remaining_months : array_like of int
        Remaining contractual term, at least 1.
    repayment : array_like of str
        ``revolving`` lines take their behavioural life.
    behavioural_life : array_like of int
        Behavioural life in months (used for revolving lines; at least 1 there).

    Returns
    -------
    ndarray of int64

    Raises
    ------
    AssumptionsError
        A revolving line with no behavioural life (intake refuses such a segment first).

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraph B5.5.40 (revolving facilities: the period
       over which the entity is exposed to credit risk).
    .. [2] FASB ASC 326-20-30-6 (the contractual term adjusted for prepayments).

    Examples
    --------
    >>> lifetime_months([200, 6, 1], ["level", "level", "revolving"], [0, 0, 36]).tolist()
    [200, 6, 36]
    """
    remaining = np.asarray(remaining_months, dtype=np.int64)
    life = np.asarray(behavioural_life, dtype=np.int64)
    revolving = np.asarray(repayment) == "revolving"  # text or object arrays alike
    if np.any(revolving & (life < 1)):
        raise AssumptionsError(
            "a revolving line has no behavioural life",
            column="behavioural_life_months",
            hint="set behavioural_life_months in every segment that holds revolving lines",
        )
    return np.where(revolving, life, remaining).astype(np.int64)


def stage_horizon(stage, life) -> np.ndarray:
    """Months of expected credit loss by IFRS 9 stage: stage 1 ``min(12, life)``, stages 2 and
    3 (POCI included) the whole life.

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraphs 5.5.3 (lifetime), 5.5.5 (12 months) and
       B5.5.38 (12 months or the life if shorter).

    Examples
    --------
    >>> stage_horizon([1, 2, 1, 3], [200, 200, 6, 36]).tolist()
    [12, 200, 6, 36]
    """
    life = np.asarray(life, dtype=np.int64)
    return np.where(np.asarray(stage, dtype=np.int64) == 1, np.minimum(12, life), life).astype(np.int64)


def lifetime_horizon(stage, life) -> np.ndarray:
    """Months of expected credit loss when every loan takes its whole life (CECL; the stage is
    not used).

    References
    ----------
    .. [1] FASB ASC 326-20-30-6 (expected credit losses over the contractual term).

    Examples
    --------
    >>> lifetime_horizon([1, 2], [200, 36]).tolist()
    [200, 36]
    """
    return np.asarray(life, dtype=np.int64).copy()


def loss_event_now(in_default_now, flagged, days_past_due, charge_off_dpd) -> np.ndarray:
    """Loans in default whose loss event is taken as certain now: PD = 1, the LGD after cures.

    Parameters
    ----------
    in_default_now : array_like of bool
        The default test (:func:`in_default`): days past due at the threshold, or a flag.
    flagged : array_like of bool
        In default by the ``defaulted`` or ``bankrupt`` flag.
    days_past_due : array_like of int
    charge_off_dpd : array_like of int
        Per loan, the charge-off threshold of its segment's roll-rate matrix; 0 where its PD
        does not come from a roll-rate matrix.

    Notes
    -----
    One default definition for both frameworks: a loan in default has not lost anything yet;
    it reaches the loss event (charge-off) with some probability, and the loss given that
    event applies. Where that probability comes from:

    * a roll-rate segment measures it from the loan's delinquency bucket, whose row already
      says how many such loans cure or pay off before charge-off: the loan keeps its bucket's
      term structure (a card at 95 days past due whose bucket charges off 90 % of the time
      gets a lifetime PD of 0.9, not 1), unless it is at or past the charge-off threshold or
      flagged (the matrix does not describe a loan in default by flag);
    * otherwise the stated ``cure_rate``: PD = 1 now and the LGD times (1 - cure_rate), the
      probability of reaching the loss event times the loss given that event.

    A loan on probation out of stage 3 passes the default test: it is not in default and is
    not measured here (``[ifrs9] probation_pd_12m``).

    References
    ----------
    .. [1] IFRS 9 *Financial Instruments*, B5.5.37 (a default definition consistent with
       credit risk management) and 5.5.3 (lifetime ECL for credit-impaired assets).
    .. [2] FASB ASC 326-20-30-2 (measurement on a pool basis where loans share risk
       characteristics, delinquency status among them).

    Examples
    --------
    >>> loss_event_now(np.array([True, True, True, True, False]), np.array([False, False, True, False, False]),
    ...                np.array([95, 95, 10, 200, 0]), np.array([0, 180, 180, 180, 180])).tolist()
    [True, False, True, True, False]
    """
    in_default_now = np.asarray(in_default_now, bool)
    charge_off = np.asarray(charge_off_dpd)
    matrix = charge_off > 0
    reached = np.asarray(days_past_due) >= charge_off
    return in_default_now & (~matrix | np.asarray(flagged, bool) | reached)
