"""corealign: date an abrupt event in one archive against a climate transition in another.

The public API is importable from here; see ``README.md`` for a tour and ``DEVELOPERS.md`` for
the architecture.
"""

from align.ages import convert_age
from align.detect import detect_event, detect_onset
from align.errors import InputError
from align.io import open_record, save_record
from align.lag import estimate_lag
from align.provenance import version as _version
from align.report import write_report
from align.resample import resample
from align.survey import survey
from align.ties import read_ties, transfer
from align.xcorr import cross_correlate

__version__ = _version()

__all__ = ["InputError", "convert_age", "cross_correlate", "detect_event", "detect_onset",
           "estimate_lag", "open_record", "read_ties", "resample", "save_record", "survey",
           "transfer", "write_report"]
