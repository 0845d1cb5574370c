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
MOVEMENT_LINES    line codes and their labels

How a loan moves
----------------
All arithmetic is in whole cents (int64) on the rounded loan figures of the two runs, so
every line is an exact sum and every table foots exactly. For one loan, with P / C the
prior / current allowance, P_m / C_m their modelled parts and A_m the modelled allowance of
the current tape at the prior run's assumptions (A_m = C_m when that rerun is absent):

=========================  ==========================================================
new loans                  A_m (current only)
derecognised               -P (prior only, no charge-off)
written off                -P (prior only, charged off: the allowance utilised);
                           -min(P, charge-off) for a partial charge-off of a continuing loan
transfer to stage k        P less any write-off, out of the prior stage, into stage k
remeasurement              A_m - P_m + write-off (continuing loans, at prior assumptions)
assumptions or scenarios   C_m - A_m (every current loan)
overlay changes            (C - C_m) - (P - P_m); C - C_m for new loans
closing                    C
=========================  ==========================================================

Per loan the lines sum to C - P, so opening + movements = closing in every stage, segment
and their crossing. The gross carrying amount moves the same way, with "other changes"
(repayments, amortisation, drawings) taking the part of remeasurement.
"""

from allowance.reconcile.movement import Movement, compare_runs, movement
from allowance.reconcile.runs import MovementError
from allowance.reconcile.tables import MOVEMENT_LINES, check_movement
from allowance.reconcile.whatif import WhatIf, what_if_comparison

__all__ = [
    "MOVEMENT_LINES", "Movement", "MovementError", "WhatIf", "check_movement", "compare_runs",
    "movement", "what_if_comparison",
]
