"""Accept-header negotiation (RFC 9110, section 12.5.1: q-values, wildcards)."""

import pytest
from service.api.negotiation import preferred

OFFER = ("application/json", "image/svg+xml", "image/png")


@pytest.mark.parametrize(
    ("accept", "tie_to_default", "want"),
    [
        ("", True, "application/json"),  # no header: the default
        ("*/*", False, "application/json"),
        ("image/png", False, "image/png"),
        ("image/svg+xml, image/png", False, "image/svg+xml"),  # equal q: first listed
        ("image/png;q=0.5, image/svg+xml", False, "image/svg+xml"),  # q decides
        ("application/json;q=0.9, image/png", False, "image/png"),
        ("image/png;q=0", False, "application/json"),  # q=0 means not acceptable
        ("image/*", False, "image/svg+xml"),  # the first offered image
        ("application/*, image/png;q=0.5", False, "application/json"),
        ("application/problem+json", False, "application/json"),
        ("text/html", True, "application/json"),  # nothing offered matches
        ("image/png, application/json", True, "application/json"),  # tie to the default
        ("image/png;q=abc", False, "application/json"),  # unreadable q counts as 0
    ],
)
def test_preferred(accept, tie_to_default, want):
    # source: RFC 9110, section 12.5.1 (q-values, wildcards, q=0 as not acceptable); the
    # tie rules are this service's documented choice
    assert preferred(accept, OFFER, tie_to_default) == want


@pytest.mark.parametrize(
    "accept",
    [
        "image/png",
        "image/png;q=0.5, image/svg+xml",
        "application/json;q=0.9, image/png",
        "image/*",
        "image/*;q=0.8, application/json;q=0.5",
        "*/*",
        "text/html",
        "image/svg+xml;q=0.2, image/png;q=0.3, application/json;q=0.1",
        "image/png;q=0",
        "application/*, image/png;q=0.5",
        "image/png, image/svg+xml;q=0.9, */*;q=0.1",
        "image/png, application/json",
    ],
)
def test_the_choice_is_werkzeugs_where_q_values_or_the_default_decide(accept):
    from werkzeug.datastructures import MIMEAccept
    from werkzeug.http import parse_accept_header

    # source: werkzeug's MIMEAccept.best_match, an independent RFC 9110 implementation
    # (server preference on ties, as tie_to_default=True here: the offered order's first)
    want = parse_accept_header(accept, MIMEAccept).best_match(OFFER, default=OFFER[0])
    assert preferred(accept, OFFER, tie_to_default=True) == want
