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
    assert preferred(accept, OFFER, tie_to_default) == want
