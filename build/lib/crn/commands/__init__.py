"""The commands of the ``crn`` command line, one module each.

Add a command by writing its module and listing its click command in ``COMMANDS``.
"""

from crn.commands.check import check
from crn.commands.compare import compare
from crn.commands.copies import copies
from crn.commands.exact import exact
from crn.commands.implement import implement
from crn.commands.ode import ode
from crn.commands.regimes import regimes
from crn.commands.report import report
from crn.commands.ssa import ssa
from crn.commands.translate import translate
from crn.commands.verify import verify

COMMANDS = [translate, check, exact, verify, ode, ssa, compare, regimes, copies, implement,
            report]
