"""Intake: read, check and account for sample tables.

>>> from nstress.intake import read_samples
>>> intake = read_samples(["whiskers.csv", "blood.csv"])  # doctest: +SKIP

See :mod:`nstress.intake.columns` (header aliases), :mod:`nstress.intake.validate`
(checks and plausibility ranges) and :mod:`nstress.intake.replicates`
(duplicate and replicate rules).
"""

from nstress.intake.ledger import Ledger
from nstress.intake.read import REFERENCE_COLUMNS, SAMPLE_COLUMNS, Intake, read_samples

__all__ = ["Intake", "Ledger", "REFERENCE_COLUMNS", "SAMPLE_COLUMNS", "read_samples"]
