"""IFRS 9 staging, the default test used by both frameworks, and the horizon in months.

Implements
----------
assign_stages    IFRS 9 stage 1/2/3 per loan with the reason, probation and POCI
in_default       the PD = 1 test (days past due at the default threshold, defaulted, bankrupt)
lifetime_months  each loan's life: remaining term, or a revolving line's behavioural life
stage_horizon    IFRS 9: 12 months in stage 1 (or the life if shorter), else the life
lifetime_horizon CECL: the life of every loan

Every rule is vectorised over the tape; the only Python loops run over segments or rule
codes, never over loans.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from allowance.exceptions import AssumptionsError, InvalidInputError
from allowance.schemas import Ifrs9Rules, SegmentAssumptions

__all__ = ["assign_stages", "in_default", "lifetime_horizon", "lifetime_months", "stage_horizon"]

_SLACK = 1e-12


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


def _low_credit_risk(tape: pd.DataFrame, segments: dict[str, SegmentAssumptions]) -> np.ndarray:
    out = np.zeros(len(tape), dtype=bool)
    segment = tape["segment"].to_numpy(dtype=object)
    grade = tape["grade"] if "grade" in tape.columns else pd.Series(pd.NA, index=tape.index)
    for name, seg in segments.items():
        if not (seg.low_credit_risk or seg.low_credit_risk_grades):
            continue
        in_segment = segment == name
        exempt = np.ones(len(tape), bool) if seg.low_credit_risk else grade.isin(seg.low_credit_risk_grades).to_numpy()
        out |= in_segment & exempt
    return out


def _flag(tape: pd.DataFrame, column: str) -> np.ndarray:
    return tape[column].to_numpy(dtype=bool) if column in tape.columns else np.zeros(len(tape), bool)


def _number(tape: pd.DataFrame, column: str) -> np.ndarray:
    if column not in tape.columns:
        return np.full(len(tape), np.nan)
    return tape[column].to_numpy(dtype=float, na_value=np.nan)


def assign_stages(
    tape: pd.DataFrame,
    pd_12m_now: np.ndarray,
    rules: Ifrs9Rules,
    segments: dict[str, SegmentAssumptions],
) -> pd.DataFrame:
    r"""IFRS 9 stage of every loan, the reason for it, and whether it is POCI.

    Parameters
    ----------
    tape : DataFrame
        The accepted tape: ``segment, days_past_due, defaulted, bankrupt`` and, where
        present, ``grade, pd_12m_at_origination, watchlist, forborne, prior_stage,
        months_performing, credit_impaired_at_purchase``.
    pd_12m_now : ndarray, shape (n,)
        Each loan's 12-month PD at the reporting date (base scenario).
    rules : Ifrs9Rules
        The ``[ifrs9]`` table.
    segments : dict of SegmentAssumptions
        For the low-credit-risk exemption.

    Returns
    -------
    DataFrame
        Index ``tape.index``; ``stage`` (int8), ``stage_reason`` (codes joined by ";"),
        ``poci`` (bool).

    Raises
    ------
    AssumptionsError
        A tape segment has no assumptions.

    Notes
    -----
    Stage 3: ``dpd>=D`` (days past due at or beyond ``default_dpd``), ``defaulted``,
    ``bankrupt``. Stage 2: ``dpd>B`` (beyond ``sicr_backstop_dpd``); ``pd_ratio``, where PD
    at origination is given, when :math:`PD_{now} \ge r \cdot PD_{orig}`,
    :math:`PD_{now} - PD_{orig} \ge` ``sicr_min_pd_increase`` and PD rose; ``watchlist`` and
    ``forborne`` where configured as SICR. Otherwise stage 1, ``performing``.

    Low credit risk (segment ``low_credit_risk`` or a grade in ``low_credit_risk_grades``):
    the PD-ratio test is not applied; a loan it would have moved stays in stage 1 with
    reason ``low_credit_risk``. DPD and flags still apply.

    Probation: a loan whose ``prior_stage`` is 3 (2) and that now meets only a better stage
    stays in its prior stage (``probation_from_3`` / ``probation_from_2``) while
    ``months_performing`` is below ``probation_months_stage3`` (``_stage2``); a blank
    ``months_performing`` counts as 0. A loan leaving stage 3 goes to its current stage.

    POCI (``credit_impaired_at_purchase``): always lifetime ECL, stage 3 while a stage-3
    trigger (or probation) holds, else stage 2; the reason starts with ``poci``.

    References
    ----------
    .. [1] IFRS 9 Financial Instruments, paragraphs 5.5.3, 5.5.5, 5.5.10 (low credit risk),
       5.5.11 (30 days past due), 5.5.13 (purchased or originated credit-impaired) and
       B5.5.37 (90 days past due).

    Examples
    --------
    >>> from allowance.schemas import Ifrs9Rules, SegmentAssumptions
    >>> tape = pd.DataFrame({"segment": ["auto"] * 3, "days_past_due": [0, 45, 120],
    ...                      "defaulted": False, "bankrupt": False, "watchlist": [True, False, False]})
    >>> out = assign_stages(tape, np.full(3, 0.02), Ifrs9Rules(sicr_pd_ratio=2.0),
    ...                     {"auto": SegmentAssumptions(pd_12m=0.02, lgd=0.4)})
    >>> out.to_dict("list")
    {'stage': [2, 2, 3], 'stage_reason': ['watchlist', 'dpd>30', 'dpd>=90'], 'poci': [False, False, False]}
    """
    n = len(tape)
    pd_now = np.asarray(pd_12m_now, dtype=float)
    if pd_now.shape != (n,) or not np.all((pd_now >= 0.0) & (pd_now <= 1.0)):
        raise InvalidInputError(f"assign_stages: pd_12m_now must be {n} PDs in [0, 1], one per loan (no NaN)")
    _segment_lookup(tape, segments)

    dpd = tape["days_past_due"].to_numpy()
    pd_orig = _number(tape, "pd_12m_at_origination")
    has_orig = ~np.isnan(pd_orig)
    orig = np.where(has_orig, pd_orig, 0.0)
    # slack of 1e-12 so that a boundary the user states (3 % - 1 % >= 0.02) is met in floats
    pd_ratio = (
        has_orig
        & (pd_now >= rules.sicr_pd_ratio * orig - _SLACK)
        & (pd_now - orig >= rules.sicr_min_pd_increase - _SLACK)
        & (pd_now > orig)
    )
    exempt = _low_credit_risk(tape, segments)

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
    from3 = (prior == 3) & (current < 3) & (performing < rules.probation_months_stage3)
    from2 = (prior == 2) & (current < 2) & (performing < rules.probation_months_stage2)
    stage = np.where(from3, 3, np.where(from2, 2, current))

    poci = _flag(tape, "credit_impaired_at_purchase")
    stage = np.where(poci, np.maximum(stage, 2), stage)
    exempted = exempt & pd_ratio & (stage == 1)

    shown = [("poci", poci), ("probation_from_3", from3), ("probation_from_2", from2 & ~poci)]
    shown += [(code, mask) for code, mask in stage3]
    shown += [(code, mask & (stage == 2)) for code, mask in stage2]
    shown += [("low_credit_risk", exempted), ("performing", (stage == 1) & ~exempted)]
    return pd.DataFrame(
        {
            "stage": stage.astype(np.int8),
            "stage_reason": _join_codes([c for c, _ in shown], [m for _, m in shown], n),
            "poci": poci,
        },
        index=tape.index,
    )


def _join_codes(codes: list[str], masks: list[np.ndarray], n: int) -> np.ndarray:
    """Join the codes whose masks are true, per loan, via a bit pattern per loan."""
    bits = np.zeros(n, dtype=np.int64)
    for i, mask in enumerate(masks):
        bits |= mask.astype(np.int64) << i
    patterns, inverse = np.unique(bits, return_inverse=True)
    text = np.array(
        [";".join(code for i, code in enumerate(codes) if int(p) >> i & 1) for p in patterns], dtype=object
    )
    return text[inverse]


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
    revolving = np.asarray(repayment, dtype=object) == "revolving"
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
