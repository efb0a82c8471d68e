"""Every transform family by name: the one list the value type, the catalogue (GET
/v1/transforms), the request schema's names and the model loader read.

Adding a family: a class in its own module, an instance in ``_ALL`` below (the order is the
catalogue's and the schema's); see DEVELOPERS.md "How to add a transform family".
"""

from __future__ import annotations

from .box_cox import BoxCox
from .categorical import Categorical
from .family import Family
from .identity import Identity
from .log import Log
from .powers import Power, Reciprocal, Sqrt, Square
from .yeo_johnson import YeoJohnson

_ALL: tuple[Family, ...] = (
    Identity(),
    Log(),
    Sqrt(),
    Reciprocal(),
    Square(),
    Power(),
    BoxCox(),
    YeoJohnson(),
    Categorical(),
)

#: name -> family
FAMILIES: dict[str, Family] = {f.name: f for f in _ALL}
#: every name a request may send, in the catalogue's order
ALL_NAMES: tuple[str, ...] = tuple(FAMILIES)
#: the families with a numeric map (a response or a numeric predictor)
NUMERIC_NAMES: tuple[str, ...] = tuple(n for n, f in FAMILIES.items() if f.numeric)
#: the families whose lambda the response's rows estimate when it is omitted
LAMBDA_NAMES: tuple[str, ...] = tuple(n for n, f in FAMILIES.items() if f.has_lambda)
#: GET /v1/transforms: each family's parameters, domain, places and reading, in order
#: (``service.api.render.transforms`` writes the entries)
CATALOGUE: tuple[Family, ...] = _ALL


def families_with_parameter(parameter: str) -> tuple[str, ...]:
    """Names of the families that take ``parameter`` (a field of their contract form), in
    registry order: the request schema refuses the parameter on any other family."""
    return tuple(n for n, f in FAMILIES.items() if any(p.field == parameter for p in f.parameters))


def family_of(name: str) -> Family:
    """The family called ``name``; an unknown name is a programming error."""
    try:
        return FAMILIES[name]
    except KeyError:
        raise ValueError(f"no transform family is called {name!r}") from None
