"""Period-over-period movement of the allowance, joined loan by loan, tied to the cent.

Implements
----------
Movement          one framework's movement tables (allowance, gross carrying amount,
                  roll-forward by segment, journal), a frozen dataclass
MovementError     the two runs cannot be joined, or a table does not foot
movement          prior run + current run (+ current tape at prior assumptions, + charge-offs)
compare_runs      the movement of every framework the two runs share
check_movement    opening + movements = closing in every column, or a named error
WhatIf            base run against a what-if rerun of the same tape
what_if_comparison
single_scenario   one scenario alone at weight 1, for a sensitivity rerun
sensitivity_table the allowance with each scenario at 100 % weight, beside the weighted one
MOVEMENT_LINES    line codes and their labels
LEDGER            per framework: how charge-offs and recoveries meet the allowance
method_changes    which segments' models or methods changed between two assumption sets
movement_columns  the columns of a run's loans.csv the movement reads (read no others)
movement_kinds    how it reads each of them (what allowance.intake.read_prior_figures keeps)

How each loan's change splits into the movement lines is set out in
:mod:`allowance.reconcile.movement`.
"""

from allowance.reconcile.methods import method_changes
from allowance.reconcile.movement import Movement, compare_runs, movement
from allowance.exceptions import MovementError
from allowance.reconcile.runs import movement_columns, movement_kinds
from allowance.reconcile.sensitivity import sensitivity_table, single_scenario
from allowance.reconcile.tables import LEDGER, MOVEMENT_LINES, check_movement
from allowance.reconcile.whatif import WhatIf, what_if_comparison

__all__ = [
    "LEDGER", "MOVEMENT_LINES", "Movement", "MovementError", "WhatIf", "check_movement", "compare_runs",
    "method_changes", "movement", "movement_columns", "movement_kinds", "sensitivity_table", "single_scenario",
    "what_if_comparison",
]
