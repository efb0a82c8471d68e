"""Transformations of a response or a numeric predictor.

Each family (one class per family, :mod:`.registry` lists them) provides ``forward``,
``inverse`` (``nan`` where the inverse is undefined, the caller decides what that means),
its domain (a vectorised mask and one phrase for messages) with the fixes a message names,
the summed log-Jacobian ``sum log|g'(y)|`` used to put likelihoods of different response
scales on the original scale, and a label.  :class:`Transform` is the frozen value the rest
of the code builds and compares; it hands every family-specific question to its family.

Families whose parameter is estimated from data (Box-Cox and Yeo-Johnson ``lambda`` of a
response; the shift of a log when the column holds zeros) are first created *unfitted* and
turned into a concrete transform by :func:`service.core.likelihood.fit_transform` on the rows
at hand, so that cross-validation can re-estimate them inside every training fold.

References: Box & Cox (1964) JRSS B 26:211-252; Yeo & Johnson (2000) Biometrika
87:954-959; Tukey (1977) *Exploratory Data Analysis* (ladder of powers).
"""

from .bounds import EXPONENT_BOUND as EXPONENT_BOUND
from .bounds import EXPONENT_FLOOR as EXPONENT_FLOOR
from .bounds import LADDER as LADDER
from .bounds import LAMBDA_BOUND as LAMBDA_BOUND
from .bounds import PARAM_FLOOR as PARAM_FLOOR
from .bounds import REFERENCE_MAX_CHARS as REFERENCE_MAX_CHARS
from .bounds import SHIFT_BOUND as SHIFT_BOUND
from .box_cox import box_cox_map as box_cox_map
from .family import Domain as Domain
from .family import Family as Family
from .log import chosen_shift as chosen_shift
from .log import needs_shift as needs_shift
from .registry import ALL_NAMES as ALL_NAMES
from .registry import CATALOGUE as CATALOGUE
from .registry import FAMILIES as FAMILIES
from .registry import LAMBDA_NAMES as LAMBDA_NAMES
from .registry import NUMERIC_NAMES as NUMERIC_NAMES
from .registry import families_with_parameter as families_with_parameter
from .value import Transform as Transform
from .value import ladder_transform as ladder_transform
from .value import read_back as read_back
from .value import written_alike as written_alike
from .yeo_johnson import yeo_johnson_map as yeo_johnson_map
