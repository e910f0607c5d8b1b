"""The table of DNA implementation schemes and the one entry point, :func:`implement`."""

from __future__ import annotations

from collections.abc import Callable

from crn.core.errors import CRNError
from crn.core.network import Network
from crn.dna.implementation import Implementation
from crn.dna.parameters import DnaParameters
from crn.dna.ssw import implement_ssw
from crn.dna.two_domain import implement_two_domain

__all__ = ["SCHEMES", "implement"]

#: Scheme name -> function ``(formal, params) -> Implementation``.
SCHEMES: dict[str, Callable[[Network, DnaParameters], Implementation]] = {
    "ssw": implement_ssw,
    "two-domain": implement_two_domain,
}


def implement(formal: Network, scheme: str = "ssw",
              params: DnaParameters | None = None) -> Implementation:
    """Implement a formal network with a DNA strand-displacement scheme.

    Parameters
    ----------
    formal : Network
        The formal network (a protocol's translation or any network).
    scheme : str, default "ssw"
        A key of :data:`SCHEMES`: ``"ssw"`` (Soloveichik, Seelig & Winfree 2010)
        or ``"two-domain"`` (Cardelli 2013).
    params : DnaParameters
        Lab-unit parameters (required: there is no default rate or concentration).

    Returns
    -------
    Implementation

    Raises
    ------
    CRNError
        For an unknown scheme or a formal reaction the scheme cannot implement.
    DnaParameterError
        When a reaction is impossible at these parameters (names the field).

    Examples
    --------
    >>> from crn.dna import DnaParameters
    >>> from crn.io.models import load_model
    >>> formal = load_model("models/approximate_majority.toml", {"n": 20, "gap": 4}).network
    >>> impl = implement(formal, "ssw", DnaParameters(rate=1e6, concentration=10e-9))
    >>> formal.n_reactions, impl.network.n_reactions, impl.network.n_species
    (4, 20, 37)
    """
    if not isinstance(formal, Network):
        raise TypeError(f"`formal` must be a Network, got {type(formal).__name__}")
    if params is None:
        raise TypeError("`params` (DnaParameters with rate and concentration) is required")
    try:
        build = SCHEMES[scheme]
    except KeyError:
        raise CRNError(f"unknown scheme {scheme!r}; expected one of "
                       f"{', '.join(SCHEMES)}") from None
    return build(formal, params)
