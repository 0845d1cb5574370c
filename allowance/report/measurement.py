"""The workbook's loss-measurement section: the expected gross credit loss beside the net.

The expected gross credit loss is the exposure expected to default over the allowance's
horizon, before recoveries (PD × EAD: the ECL sum with LGD = 1); the modelled ECL is the loss
net of recoveries (PD × LGD × EAD). Their ratio is the expected loss severity. Loss-rate
segments have no gross figure: a loss rate is net of recoveries.

Loans measured one by one (collateral dependent, or the lender's individual assessment) are
listed by measurement beside the model's loans.

Implements
----------
gross_net_section   the "Expected credit loss, gross and net of recoveries" table by segment
measurement_section the allowance by measurement: the model, collateral dependent, individual
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from allowance.frameworks import FRAMEWORK_RULES
from allowance.report.figures import Figure, Ledger, LoanRefs
from allowance.report.xlsx import Sheet, col_letter

__all__ = ["gross_net_section", "measurement_section"]

#: measurement code -> the workbook's line (codes as :data:`allowance.individual.MEASUREMENTS`)
MEASUREMENT_LINES: dict[str, str] = {
    "model": "The model (PD x LGD x EAD over the scenarios)",
    "collateral_dependent": "Collateral dependent, flagged on the tape (ASC 326-20-35-4/35-5; IFRS 9 B5.5.55)",
    "collateral_dependent_defaulted": "Collateral dependent: secured loans in default (segment option)",
    "individual": "Individually assessed (tape individual_ecl)",
}


def _with_gross(loans: pd.DataFrame, refs: LoanRefs, framework: str) -> set[Any]:
    """The segments with a gross figure in ``framework`` (one pass over the book, not one a segment)."""
    column = f"gross_loss_{framework}"
    if column not in loans:
        return set()
    return refs.labels_where("segment", pd.to_numeric(loans[column], errors="coerce").notna().to_numpy())


def gross_net_section(sheet: Sheet, r: int, frameworks: list[str], loans: pd.DataFrame, refs: LoanRefs,
                      led: Ledger) -> int:
    """Write the gross / net table from row ``r``; return the next free row.

    Per segment and framework: the expected gross credit loss (``gross_loss_<framework>``),
    the modelled ECL net of recoveries (``ecl_<framework>_modelled``, before overlays) and
    net / gross. The total row sums the segment rows above it.
    """
    if not any(f"gross_loss_{f}" in loans for f in frameworks):
        return r
    r = sheet.section(r, "Expected credit loss, gross and net of recoveries (before overlays)")
    r = sheet.note(r, "Gross: the exposure expected to default over the allowance horizon, before any recovery "
                      "(PD x EAD, discounted as the framework discounts). Net: the modelled ECL after recoveries "
                      "(PD x LGD x EAD). Net / gross is the expected loss severity. Loss-rate segments have no "
                      "gross figure: a loss rate is already net of recoveries.")
    cols, kinds = ["Segment"], ["text"]
    for f in frameworks:
        label = FRAMEWORK_RULES[f].label
        cols += [f"{label} gross loss", f"{label} net (modelled ECL)", f"{label} net / gross"]
        kinds += ["money", "money", "rate"]
    sheet.header(r, 1, cols, kinds)
    r += 1
    first, loss_rate = r, False
    gross_in = {f: _with_gross(loans, refs, f) for f in frameworks}
    labels, missing = refs.labels("segment")
    for segment in sorted(pd.unique(loans["segment"]) if missing else labels, key=str):
        sheet.label(r, 1, str(segment))
        crit = [("segment", f"$A{r}", segment)]
        for j, f in enumerate(frameworks):
            c = 2 + 3 * j
            if segment not in gross_in[f]:  # left out of the totals, which compare like with like
                sheet.put(r, c, "loss rate (net only)", "text")
                loss_rate = True
                continue
            gross = led.put(sheet, r, c, refs.total(f"gross_loss_{f}", crit), "money")
            net = led.put(sheet, r, c + 1, refs.total(f"ecl_{f}_modelled", crit), "money")
            g, n = led.local(sheet, gross), led.local(sheet, net)
            led.put(sheet, r, c + 2, Figure(f"=IF({gross}=0,0,{net}/{gross})", n / g if g else 0.0), "rate")
        r += 1
    sheet.label(r, 1, "Total, PD-method segments" if loss_rate else "Total", total=True)
    for j in range(len(frameworks)):
        c = 2 + 3 * j
        sums = []
        for col in (c, c + 1):
            letter = col_letter(col)
            values = [led.values.get(f"{sheet.name}!{letter}{row}") for row in range(first, r)]
            value = int(np.sum([round(v * 100) for v in values if isinstance(v, (int, float))])) / 100.0
            sums.append(led.put(sheet, r, col, Figure(f"=SUM({letter}{first}:{letter}{r - 1})", value), "money",
                                total=True))
        g, n = (led.local(sheet, ref) for ref in sums)
        led.put(sheet, r, c + 2, Figure(f"=IF({sums[0]}=0,0,{sums[1]}/{sums[0]})", n / g if g else 0.0), "rate",
                total=True)
    return r + 2


def measurement_section(sheet: Sheet, r: int, frameworks: list[str], loans: pd.DataFrame, refs: LoanRefs,
                        led: Ledger, detail: str = "loans.csv") -> int:
    """Write the allowance by measurement from row ``r`` (only when some loan is measured one by
    one); return the next free row. Each line is a COUNTIFS / SUMIFS over ``measurement``;
    ``detail`` names where each loan's measurement is."""
    if "measurement" not in loans:
        return r
    labels, missing = refs.labels("measurement")
    if not missing and set(labels) <= {"model"}:  # every loan measured by the model
        return r
    r = sheet.section(r, "Allowance by measurement (loans measured one by one)")
    r = sheet.note(r, "Collateral-dependent loans: amortised cost less the collateral's fair value less costs to "
                      "sell, floored at 0, the same in every scenario, in the frameworks the segment lists (the model "
                      "measures them in the others). Individually assessed loans take the tape's individual_ecl in "
                      f"every framework. The measurement column of {detail} names each loan's.")
    cols, kinds = ["Measurement", "Code", "Loans", "Balance"], ["text", "text", "count", "money"]
    for f in frameworks:
        label = FRAMEWORK_RULES[f].label
        cols += [f"{label} modelled allowance", f"{label} gross loss"]
        kinds += ["money", "money"]
    sheet.header(r, 1, cols, kinds)
    r += 1
    present = set(labels)
    for code, line in MEASUREMENT_LINES.items():
        if code not in present:
            continue
        sheet.label(r, 1, line)
        sheet.label(r, 2, code)
        crit = [("measurement", f"$B{r}", code)]
        led.put(sheet, r, 3, refs.count(crit), "count")
        led.put(sheet, r, 4, refs.total("balance", crit), "money")
        for j, f in enumerate(frameworks):
            led.put(sheet, r, 5 + 2 * j, refs.total(f"ecl_{f}_modelled", crit), "money")
            led.put(sheet, r, 6 + 2 * j, refs.total(f"gross_loss_{f}", crit), "money")
        r += 1
    return r + 1
