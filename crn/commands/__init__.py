"""The commands of the ``crn`` command line, one module each.

Add a command by writing its module and listing its click command in ``COMMANDS``.
"""

from .check import check
from .compare import compare
from .copies import copies
from .exact import exact
from .implement import implement
from .ode import ode
from .regimes import regimes
from .report import report
from .ssa import ssa
from .translate import translate
from .verify import verify

COMMANDS = [translate, check, exact, verify, ode, ssa, compare, regimes, copies, implement,
            report]
