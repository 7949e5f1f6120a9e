"""loopshift: move a feedback controller between its analog, digital and op-amp circuit forms.

The package computes; the command-line interface (``convert.cli``) and the report writers
(``convert.report``) only arrange the computations. Importing ``convert`` loads neither
matplotlib nor python-control; both are imported lazily where they are needed.
"""

from convert.errors import LoopshiftError, InputError  # noqa: F401

__version__ = "0.1.0"
