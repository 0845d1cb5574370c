"""What a run shows people beside the loan results: scenario totals, the term structures
used, roll-rate analytics and sample loan schedules.

Implements
----------
scenario_summary      each scenario's allowance at 100 % weight, the weighted and the final result
term_structure_table  the monthly PD curves used, long form
roll_rate_table       roll-rate analytics of every segment with a transition matrix
loan_schedule         one loan's schedule on the engine's own terms and curves
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa

from allowance import cashflows, curves, ecl, individual, macro
from allowance.engine.chunk import ChunkInputs, _curve_keys, _individual_measurement, chunk_inputs
from allowance.engine.tables import Prepared
from allowance.money import money_total
from allowance.schemas import Framework, RunConfig


def scenario_summary(loans: pd.DataFrame, config: RunConfig) -> pd.DataFrame:
    """Each scenario's allowance at 100 % weight per framework, then the weighted and final results.

    Columns ``framework, scenario, weight, ecl``. The rows ``weighted (modelled)`` (weight:
    the sum of the weights, 1) and ``final (after overlays)`` (weight blank) follow each
    framework's scenarios. Every figure is the sum of the rounded loan figures in whole cents
    (the weighted row can differ by a few cents from the weighted sum of the scenario rows);
    a column missing from ``loans`` shows NaN.

    Examples
    --------
    >>> from allowance.schemas import Assumptions
    >>> config = RunConfig(assumptions=Assumptions.model_validate({
    ...     "run": {"as_of": "2026-09-30", "frameworks": ["cecl"]},
    ...     "segments": {"auto": {"pd_12m": 0.02, "lgd": 0.4}},
    ...     "cecl": {"reasonable_supportable_months": 12},
    ...     "scenarios": {"base": {"weight": 0.6}, "down": {"weight": 0.4, "pd_multiplier": [2.0]}}}))
    >>> loans = pd.DataFrame({"ecl_cecl_base": [1.0, 2.0], "ecl_cecl_down": [3.0, 4.0],
    ...                       "ecl_cecl_modelled": [1.8, 2.8], "ecl_cecl": [1.8, 2.8]})
    >>> table = scenario_summary(loans, config)
    >>> table[["scenario", "weight", "ecl"]].values.tolist()
    [['base', 0.6, 3.0], ['down', 0.4, 7.0], ['weighted (modelled)', 1.0, 4.6], ['final (after overlays)', nan, 4.6]]
    """
    scenarios = config.assumptions.scenarios

    def total(column: str) -> float:
        return money_total(loans[column]) if column in loans.columns else float("nan")

    rows = []
    for fw in config.frameworks:
        for name, scenario in scenarios.items():
            rows.append({"framework": fw, "scenario": name, "weight": float(scenario.weight),
                         "ecl": total(f"ecl_{fw}_{name}")})
        rows.append({"framework": fw, "scenario": "weighted (modelled)",
                     "weight": float(sum(s.weight for s in scenarios.values())), "ecl": total(f"ecl_{fw}_modelled")})
        rows.append({"framework": fw, "scenario": "final (after overlays)", "weight": np.nan, "ecl": total(f"ecl_{fw}")})
    return pd.DataFrame(rows, columns=["framework", "scenario", "weight", "ecl"])


def term_structure_table(prep: Prepared) -> pd.DataFrame:
    """The monthly PD curves of every segment key, framework and scenario, long form."""
    frames = []
    months = np.arange(1, prep.months + 1)
    for f, fw in enumerate(prep.frameworks):
        for name, ts in prep.structures.items():
            if prep.loss_rates is not None and name in prep.loss_rates.method:
                continue  # a loss-rate segment has no PD term structure
            off = prep.key_offset[name]
            # by age: whole years of age only (one row per month of age is too many)
            shown = np.arange(0, len(ts.keys), 12 if ts.source == "pd_curve_by_age" else 1)
            if not len(shown):
                continue
            n_sc = len(prep.scenario_names)
            marg = prep.pd[f, off + shown].transpose(0, 2, 1)  # [K, S, T]
            cum = np.stack([curves.cumulative_pd(marg[i], ts.smm[k] if ts.smm is not None else None)
                            for i, k in enumerate(shown)])
            rows = len(shown) * n_sc * len(months)
            # one frame per segment and framework, built column-wise (a frame per key and
            # scenario cost seconds for segments with many keys)
            frames.append(pd.DataFrame({
                "segment": _repeated_text([name], np.zeros(rows, dtype=np.int64)),
                "key": _repeated_text([str(ts.keys[k]) for k in shown], np.repeat(np.arange(len(shown)), n_sc * len(months))),
                "framework": _repeated_text([fw], np.zeros(rows, dtype=np.int64)),
                "scenario": _repeated_text(list(prep.scenario_names),
                                           np.tile(np.repeat(np.arange(n_sc), len(months)), len(shown))),
                "month": np.tile(months, len(shown) * n_sc),
                "marginal_pd": marg.reshape(-1),
                "cumulative_pd": cum.reshape(-1),
            }))
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def _repeated_text(texts: list[str], codes: np.ndarray) -> pd.api.extensions.ExtensionArray:
    """``texts[codes]`` as a text column (pandas' ``str``), made by Arrow: the same column as
    from an array of Python strings, which pandas converts one element at a time (19 ms for the
    demo's 105,840 term-structure rows a column, against 1.6 ms)."""
    return pd.array(pa.array(texts, type=pa.string()).take(pa.array(codes)), dtype=_TEXT)


#: pandas' text dtype, as it infers it for Python strings
_TEXT = pd.Series(["text"]).dtype


def pd_path_view(tape: pd.DataFrame, prep: Prepared) -> pd.DataFrame:
    """Each segment's monthly PD path per framework and scenario, weighted by the book's balance
    on each of its curve keys (:func:`allowance.macro.pd_path_table`): what the scenarios' paths
    do to the PDs, for the workbook's charts."""
    if tape.empty:
        return pd.DataFrame()
    return pd_path_from(pd_path_weights(tape, prep), prep)


def pd_path_weights(tape: pd.DataFrame, prep: Prepared) -> np.ndarray:
    """The balance on each curve key of the book's PD table (additive over parts of a book)."""
    keys = _curve_keys(tape, prep, prep.segments.codes(tape["segment"]))
    return np.bincount(keys, weights=tape["balance"].to_numpy(float), minlength=prep.pd.shape[1])


def pd_path_from(weights: np.ndarray, prep: Prepared) -> pd.DataFrame:
    """:func:`pd_path_view` from the balance on each curve key (:func:`pd_path_weights`)."""
    key_segments = [name for name, ts in prep.structures.items() for _ in ts.keys]
    own = len(key_segments)  # the segments' own keys; the probation rows after them are left out
    frames = [macro.pd_path_table(prep.tables[fw].pd[:own], prep.scenario_names, key_segments, weights[:own], fw)
              for fw in prep.frameworks]
    return pd.concat(frames, ignore_index=True)


def roll_rate_table(config: RunConfig) -> pd.DataFrame:
    """Roll-rate analytics of every segment whose PD comes from a transition matrix."""
    frames = [
        curves.roll_rate_summary(name, seg.transition_matrix, seg.charge_off_dpd)
        for name, seg in config.assumptions.segments.items()
        if seg.pd_source == "transition_matrix"
    ]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()


def representative_loans(loans: pd.DataFrame, per_segment: int) -> pd.DataFrame:
    """The loans whose schedules the workbook shows: typical of their segment, and why.

    For each segment, among its stage 1 loans (all its loans if none is in stage 1), the
    ``per_segment`` loans nearest the segment's median balance and median remaining term,
    distance measured in centred ranks, p = (rank - 1/2) / n, as |p(balance) - 1/2| +
    |p(term) - 1/2| (the median scores 0), so neither a loan maturing next month nor an
    outlier balance is picked. Ties go to the earlier loan. Common practice for a sample shown
    to reviewers, no source. Returns the positions of the loans in ``loans`` and a ``chosen``
    text per loan.
    """
    if per_segment <= 0 or loans.empty:
        return pd.DataFrame(columns=["position", "chosen"])
    segment, names = pd.factorize(loans["segment"])  # codes: no Python object per loan
    performing = loans["stage"].to_numpy() == 1 if "stage" in loans else np.ones(len(loans), bool)
    term = loans["remaining_months"].to_numpy(dtype=float) if "remaining_months" in loans else np.zeros(len(loans))
    balance = loans["balance"].to_numpy(dtype=float)
    rows = []
    for code, name in enumerate(names.tolist()):
        members = np.flatnonzero(segment == code)
        pool = members[performing[members]] if performing[members].any() else members
        b = (_average_ranks(balance[pool]) - 0.5) / len(pool)
        t = (_average_ranks(term[pool]) - 0.5) / len(pool)
        distance = np.abs(b - 0.5) + np.abs(t - 0.5)
        picks = pool[_nearest(distance, per_segment)]
        why = (f"nearest its segment's median balance ({np.median(balance[pool]):,.0f}) and remaining term "
               f"({np.median(term[pool]):.0f} months) among {'stage 1' if performing[members].any() else 'all'} "
               f"{name} loans")
        rows += [{"position": int(i), "chosen": why} for i in picks]
    return pd.DataFrame(rows, columns=["position", "chosen"])


def _average_ranks(values: np.ndarray) -> np.ndarray:
    """``pandas.Series(values).rank()`` (1-based, ties taking their average rank) from one
    sort: a tie of ``c`` values after ``s`` smaller ones ranks ``s + (c + 1) / 2``, the same
    half-integer pandas makes as the mean of the tie's ranks. With NaN, pandas ranks.

    Examples
    --------
    >>> _average_ranks(np.array([3.0, 1.0, 3.0, 2.0])).tolist()
    [3.5, 1.0, 3.5, 2.0]
    """
    values = np.asarray(values, dtype=np.float64)
    if np.isnan(values).any():
        return pd.Series(values).rank().to_numpy()
    if len(values) and values.min() >= 0 and values.max() <= 4 * len(values) + 1024:
        whole = values.astype(np.int64)
        if (whole == values).all():  # whole numbers in a short range (months): counted, not sorted
            count = np.bincount(whole)
            return (np.cumsum(count) - count)[whole] + (count[whole] + 1) / 2
    order = np.argsort(values)
    ordered = values[order]
    first = np.flatnonzero(np.r_[True, ordered[1:] != ordered[:-1]])
    count = np.diff(np.r_[first, len(values)])
    ranks = np.empty(len(values))
    ranks[order] = np.repeat(first + (count + 1) / 2, count)
    return ranks


def _nearest(distance: np.ndarray, k: int) -> np.ndarray:
    """``np.argsort(distance, kind="stable")[:k]`` without sorting them all: the ``k``
    smallest (ties to the earlier position) from the values up to the k-th smallest.

    Examples
    --------
    >>> _nearest(np.array([0.3, 0.1, 0.2, 0.1, 0.5]), 2).tolist()
    [1, 3]
    """
    if k >= len(distance):
        return np.argsort(distance, kind="stable")[:k]
    bound = np.partition(distance, k - 1)[k - 1]
    near = np.flatnonzero(distance <= bound)
    return near[np.argsort(distance[near], kind="stable")][:k]


def schedule_sample(tape: pd.DataFrame, loans: pd.DataFrame, prep: Prepared, per_segment: int) -> pd.DataFrame:
    """Representative loans per segment (:func:`representative_loans`), scheduled month by month
    on the first scenario's PDs.

    The loop's inputs are built once for all the chosen loans (a loan's inputs do not depend on
    the other loans of its chunk), then each loan is scheduled as :func:`loan_schedule` does.
    """
    picks = representative_loans(loans, per_segment)
    if picks.empty:
        return pd.DataFrame()
    rows = tape.iloc[picks["position"].to_numpy()]
    known = rows["segment"].isin(list(prep.structures)).to_numpy()
    rows, why = rows[known], picks["chosen"].to_numpy()[known]
    if rows.empty:
        return pd.DataFrame()
    inputs = chunk_inputs(rows, prep)
    measured = _individual_measurement(rows, inputs.terms, prep)
    frames = [_schedule_of(rows, i, inputs, measured, prep, chosen=chosen) for i, chosen in enumerate(why)]
    return pd.concat(frames, ignore_index=True)


def loan_schedule(row: pd.DataFrame, prep: Prepared, framework: Framework | None = None, scenario: int = 0) -> pd.DataFrame:
    """One loan's schedule on the engine's own terms and curves, and what the engine booked.

    The contractual and expected columns of :func:`allowance.cashflows.schedule`, then the
    engine's month by month (:func:`allowance.ecl.loan_months` on the very inputs
    :func:`~allowance.engine.chunk.run_chunk` builds): ``ead, marginal_pd, refinance_pd,
    default_share, lgd, discount_factor, gross_loss, ecl`` over the allowance's horizon (blank
    after it). ``ecl`` sums to the loan's ``ecl_<framework>_<scenario>`` in loans.csv before
    rounding (POCI: before the ECL at purchase is taken off). A loan in default whose loss
    event is certain has one row, month 0 (PD 1, ECL = LGD × EAD); a loan measured one by one
    (collateral dependent, individually assessed) one row with its amount; ``measurement``
    says which.
    """
    inputs = chunk_inputs(row, prep)
    return _schedule_of(row, 0, inputs, _individual_measurement(row, inputs.terms, prep), prep, framework, scenario)


def _schedule_of(rows: pd.DataFrame, i: int, inputs: ChunkInputs, measured: tuple[np.ndarray, np.ndarray],
                 prep: Prepared, framework: Framework | None = None, scenario: int = 0,
                 chosen: str | None = None) -> pd.DataFrame:
    """:func:`loan_schedule` of the loan in position ``i`` of ``rows``, from the inputs of all
    of them (``measured``: their :func:`~allowance.engine.chunk._individual_measurement`), with
    a ``chosen`` column (why the sample took it) second when given."""
    fw = framework or prep.frameworks[0]
    f = prep.frameworks.index(fw)
    t = inputs.terms
    # the framework's own life, run-off and SMM row (a line CECL runs off: no payoff SMM on top)
    months = int(inputs.frameworks.horizon[f, i])
    cols = np.minimum(t.prepay_offset[i] + np.arange(months), prep.smm.shape[1] - 1)
    repayment = t.repayment[i]
    paydown = float(inputs.frameworks.paydown[f, i])
    frame = cashflows.schedule(
        repayment, float(t.balance[i]), float(rows["interest_rate"].iloc[i]), months,
        interest_only_months_left=int(t.io_left[i]), residual=float(t.residual[i]),
        payment=float(t.payment[i]), paydown=paydown, smm=prep.smm[inputs.frameworks.prepay[f, i], cols],
        # the loan's own PD level against its curve row, as the loop reads it (ecl.KernelInputs.pd_scale)
        marginal_pd=np.minimum(prep.pd[f, inputs.kernel.curve[f, i], :months, scenario] * _pd_scale(inputs, i), 1.0),
    )
    stage = inputs.stages["stage"].to_numpy()[i:i + 1] if inputs.stages is not None else np.ones(1, dtype=np.int64)
    horizon = int(prep.rules[f].horizon(stage, inputs.frameworks.horizon[f, i:i + 1])[0])
    booked = ecl.loan_months(inputs.kernel, i, f, scenario, horizon)
    method, replaced = measured
    measurement = "model"
    if not np.isnan(replaced[f, i]):  # measured one by one: the amount, the same in every scenario
        measurement = str(list(individual.MEASUREMENTS)[int(method[i])])
        booked = pd.DataFrame([{"month": 0, "ead": float(t.balance[i]), "ecl": float(replaced[f, i])}])
    if booked["month"].iloc[0] == 0:  # nothing projected: the loss is booked now
        frame = pd.DataFrame({"month": [0], "opening_balance": [float(t.balance[i])]})
    # one frame from its columns (inserting the labels one by one copied it each time)
    columns = _beside(frame, booked)
    labels = {"loan_id": rows["loan_id"].iloc[i]} | ({} if chosen is None else {"chosen": chosen})
    labels |= {"framework": fw, "scenario": prep.scenario_names[scenario], "month": columns.pop("month"),
               "measurement": measurement}
    return pd.DataFrame(labels | columns)


def _pd_scale(inputs: ChunkInputs, i: int) -> float:
    """The loan's own PD level against its curve row (1 when the loop reads the curve as it is)."""
    scale = inputs.kernel.pd_scale
    return 1.0 if scale is None else float(scale[i])


def _beside(frame: pd.DataFrame, booked: pd.DataFrame) -> dict[str, np.ndarray]:
    """The columns of ``frame.merge(booked, on="month", how="left")`` for two tables of
    distinct months: the booked columns beside the schedule's, blank in the months the engine
    did not book; a name both have is suffixed ``_x`` (the schedule's) and ``_y`` (the
    engine's), as the merge does.

    Examples
    --------
    >>> pd.DataFrame(_beside(pd.DataFrame({"month": [1, 2, 3], "a": [1.0, 2.0, 3.0]}),
    ...                      pd.DataFrame({"month": [1, 2], "b": [5.0, 6.0]})))
       month    a    b
    0      1  1.0  5.0
    1      2  2.0  6.0
    2      3  3.0  NaN
    >>> list(_beside(pd.DataFrame({"month": [1], "a": [1.0]}), pd.DataFrame({"month": [1], "a": [2.0]})))
    ['month', 'a_x', 'a_y']
    """
    where = pd.Index(frame["month"].to_numpy()).get_indexer(booked["month"].to_numpy())
    found = where >= 0
    both = (set(frame.columns) & set(booked.columns)) - {"month"}
    columns = {f"{name}_x" if name in both else name: frame[name].to_numpy() for name in frame.columns}
    for name in booked.columns:
        if name != "month":
            column = np.full(len(frame), np.nan)
            column[where[found]] = booked[name].to_numpy(dtype=float)[found]
            columns[f"{name}_y" if name in both else name] = column
    return columns
