"""Reporting: formats results it is handed; computes nothing.

Matplotlib's log messages (e.g. that it made a temporary cache folder because the home folder
cannot be written) are not shown: the figures are drawn off screen, and a run with ``--quiet``
prints nothing but its errors.
"""

import logging

logging.getLogger("matplotlib").addHandler(logging.NullHandler())
