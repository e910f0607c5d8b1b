"""The commands of the ``crn`` command line, one module each.

Add a command by writing its module and listing its click command in ``COMMANDS``.
"""

COMMANDS = []
