"""corealign: date an abrupt event in one archive against a climate transition in another.

The public API is importable from here; see ``README.md`` for a tour and ``DEVELOPERS.md`` for
the architecture.
"""

from align.ages import convert_age
from align.detect import detect_event, detect_onset
from align.errors import InputError
from align.io import open_record, save_record
from align.provenance import version as _version
from align.resample import resample
from align.ties import read_ties, transfer

__version__ = _version()

__all__ = ["InputError", "convert_age", "detect_event", "detect_onset", "open_record",
           "read_ties", "resample", "save_record", "transfer"]
