"""Digital (sampled) controllers: analog -> digital methods, digital -> analog, structures,
word formats and code emission.

Exports (helper "digital"): ``METHODS``, ``discretize``, ``DigitalRealization``,
``difference_equation``, ``INVERSE_METHODS``, ``to_analog``, ``add_derivative_filter``,
``survey_methods``.
"""

from convert.digital.realization import METHODS, DigitalRealization, difference_equation, discretize  # noqa: F401
from convert.digital.inverse import INVERSE_METHODS, to_analog  # noqa: F401
