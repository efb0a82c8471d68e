"""Content negotiation: which of the media types an endpoint offers an Accept header prefers."""

from __future__ import annotations


def preferred(accept: str, offered: tuple[str, ...], tie_to_default: bool) -> str:
    """The offered media type the Accept header ranks highest; ``offered[0]`` is the default.

    q-values are honoured (RFC 9110, section 12.5.1); ``*/*`` and a missing header select the
    default, ``type/*`` the first offered type of that kind.  On equal q the default wins when ``tie_to_default``, otherwise the
    type listed first in the header.
    """
    default = offered[0]
    best: dict[str, tuple[float, int]] = {}  # media type -> (q, position in the header)
    for pos, part in enumerate(accept.split(",")):
        fields = [f.strip() for f in part.split(";")]
        kind = fields[0].lower()
        q = 1.0
        for f in fields[1:]:
            if f.lower().startswith("q="):
                try:
                    q = float(f[2:])
                except ValueError:
                    q = 0.0
        if kind in ("*/*", "") or (kind.endswith("+json") and default == "application/json"):
            kind = default
        elif kind.endswith("/*"):  # the first offered type of that kind
            kind = next((o for o in offered if o.startswith(kind[:-1])), kind)
        if kind in offered and q > best.get(kind, (0.0, pos))[0]:
            best[kind] = (q, pos)
    if not best:
        return default
    top = max(q for q, _ in best.values())
    if top <= 0:
        return default
    if tie_to_default and best.get(default, (0.0, 0))[0] == top:
        return default
    return min((pos, kind) for kind, (q, pos) in best.items() if q == top)[1]
