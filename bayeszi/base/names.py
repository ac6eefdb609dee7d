"""Names shared by every layer: the families, their zero mechanisms, the posterior variables.

The posterior variable names are built here and nowhere else, so that the model graph, the
answers, saving and loading agree on them. The wording of the zeros part (``P(extra zero)``
in the zero-inflated families, ``P(Y = 0)`` in the hurdle families) is also kept here.

Example
-------
>>> from bayeszi.base import names
>>> names.check_family("zinbb")  # doctest: +ELLIPSIS
Traceback (most recent call last):
...
bayeszi.base.errors.BayesziError: unknown family 'zinbb'; did you mean 'zinb'? ...
>>> names.zero_mechanism("hurdle-poisson"), names.zeros_label("hurdle-poisson")
('hurdle', 'P(Y = 0)')
>>> names.group_sd("counts", "reach"), names.coef("zeros")
('counts_sd_reach', 'zeros_coef')
"""

from __future__ import annotations

import difflib

from bayeszi.base.errors import BayesziError

#: every family, in the order tables and menus list them
FAMILY_NAMES: tuple[str, ...] = (
    "poisson",
    "negbin",
    "zip",
    "zinb",
    "hurdle-poisson",
    "hurdle-negbin",
)

#: the zero mechanism of each family: None (no zeros part), "inflation" or "hurdle"
ZERO_MECHANISMS: dict[str, str | None] = {
    "poisson": None,
    "negbin": None,
    "zip": "inflation",
    "zinb": "inflation",
    "hurdle-poisson": "hurdle",
    "hurdle-negbin": "hurdle",
}

#: the two parts of every model
PARTS: tuple[str, str] = ("counts", "zeros")

#: the probability of a zero count, whatever made it
PROB_ZERO = "P(Y = 0)"

#: what the zeros part's probability is, per zero mechanism
ZEROS_LABELS: dict[str | None, str] = {
    "inflation": "P(extra zero)",
    "hurdle": PROB_ZERO,
    None: "",
}


def check_family(name: object) -> str:
    """``name`` if it is a family, else a BayesziError with the nearest name."""
    if isinstance(name, str) and name in ZERO_MECHANISMS:
        return name
    choices = ", ".join(repr(n) for n in FAMILY_NAMES)
    near = difflib.get_close_matches(str(name).strip().lower(), FAMILY_NAMES, n=1, cutoff=0.5)
    hint = f"did you mean {near[0]!r}? " if near else ""
    raise BayesziError(f"unknown family {name!r}; {hint}Set family to one of {choices}.")


def zero_mechanism(family: str) -> str | None:
    """None, ``"inflation"`` or ``"hurdle"`` for a family name."""
    return ZERO_MECHANISMS[check_family(family)]


def zeros_label(family: str) -> str:
    """``P(extra zero)``, ``P(Y = 0)`` or ``""`` (no zeros part) for a family name."""
    return ZEROS_LABELS[zero_mechanism(family)]


def zeros_meaning(family: str) -> str:
    """One phrase saying what the zeros part models, for tables and report text."""
    kind = zero_mechanism(family)
    if kind == "inflation":
        return "P(extra zero): the chance of a structural zero"
    if kind == "hurdle":
        return "P(Y = 0): the chance of any zero (the hurdle)"
    return "no zeros part"


def zeros_part_label(family: str) -> str:
    """How tables name the zeros-part probability of a family with a zeros part.

    Example
    -------
    >>> zeros_part_label("zinb"), zeros_part_label("hurdle-negbin")
    ('P(extra zero), zeros part', 'P(Y = 0), zeros part (hurdle)')
    """
    kind = zero_mechanism(family)
    tail = " (hurdle)" if kind == "hurdle" else ""
    return f"{ZEROS_LABELS[kind]}, zeros part{tail}"


def zeros_odds_label(family: str) -> str:
    """What the zeros part's odds are odds of: ``P(extra zero)`` or ``P(Y = 0)``.

    Unlike :func:`zeros_label` it never returns ``""`` (a family without a zeros part is
    named like a hurdle: the odds of a zero), for labels that exist only with a zeros part.
    """
    return ZEROS_LABELS["inflation" if zero_mechanism(family) == "inflation" else "hurdle"]


def zeros_origin(family: str | None) -> str:
    """Where a family's zeros come from, in one phrase (for check notes and figures);
    ``None`` (no family known) reads as a family without a zeros part.

    Example
    -------
    >>> zeros_origin("hurdle-poisson")
    'every zero comes from the zeros part, which models P(Y = 0) directly'
    """
    kind = zero_mechanism(family) if family is not None else None
    if kind == "inflation":
        return "zeros come from both parts (extra zeros and count-process zeros)"
    if kind == "hurdle":
        return f"every zero comes from the zeros part, which models {PROB_ZERO} directly"
    return "every zero comes from the count process"


# ------------------------------------------------------------------ posterior variables
def coef(part: str) -> str:
    """User-scale coefficients of a part (``counts_coef``)."""
    return f"{part}_coef"


def std_coef(part: str) -> str:
    """Coefficients on the internal (centred, scaled) scale, as sampled."""
    return f"{part}_std_coef"


def std_coef_raw(part: str, j: int) -> str:
    """The ``j``-th coefficient sampled on its own (priors of mixed kinds), stacked into
    :func:`std_coef`."""
    return f"{part}_std_coef_{j}"


def term_dim(part: str) -> str:
    """The coordinate naming a part's terms."""
    return f"{part}_term"


def slope_term_dim(part: str) -> str:
    """The coordinate naming a part's varying slopes."""
    return f"{part}_slope_term"


def group_sd(part: str, group: str) -> str:
    """Between-level sd of a group's intercepts in a part."""
    return f"{part}_sd_{group}"


def group_raw(part: str, group: str) -> str:
    """Standardised (non-centred) intercept effects of a group in a part."""
    return f"{part}_z_{group}"


def effect(part: str, group: str) -> str:
    """Intercept effects of a group's levels in a part (log-rate or logit shift)."""
    return f"{part}_effect_{group}"


def level(part: str, group: str) -> str:
    """Centred intercepts of a group's data-rich levels in a part (sampled centred)."""
    return f"{part}_level_{group}"


def centred_dim(part: str, group: str) -> str:
    """The coordinate naming a group's levels whose intercepts are sampled centred."""
    return f"{part}_{group}_centred"


def noncentred_dim(part: str, group: str) -> str:
    """The coordinate naming a group's levels whose intercepts are sampled non-centred."""
    return f"{part}_{group}_noncentred"


def slope_sd(part: str, group: str) -> str:
    """Between-level sd of a group's varying slopes in a part."""
    return f"{part}_slope_sd_{group}"


def slope_raw(part: str, group: str) -> str:
    """Standardised varying-slope effects of a group in a part."""
    return f"{part}_slope_z_{group}"


def slope(part: str, group: str) -> str:
    """Varying-slope effects of a group in a part (internal scale)."""
    return f"{part}_slope_{group}"


def corr(group: str) -> str:
    """Correlation of a group's counts and zeros intercepts."""
    return f"corr_{group}"


def corr_raw(group: str) -> str:
    """The Beta-distributed (corr + 1) / 2 behind :func:`corr`."""
    return f"z_corr_{group}"


# ---------------------------------------------------------------- what a reader sees
#: Sampler-diagnostic headings, spelled as the trade writes them (Vehtari, Gelman, Simpson,
#: Carpenter & Buerkner 2021, Bayesian Anal.: rank-normalized R-hat, bulk-ESS, tail-ESS).
RHAT = "R-hat"
BULK_ESS = "bulk ESS"
TAIL_ESS = "tail ESS"
DIAGNOSTIC_COLUMNS: tuple[str, str, str] = (RHAT, BULK_ESS, TAIL_ESS)


def group_sd_label(group: str) -> str:
    """The table label of a group's intercept sd, e.g. ``reach effects: sd``."""
    return f"{group} effects: sd"


def slope_sd_label(group: str, term: str) -> str:
    """The table label of the sd of a group's slopes on ``term``."""
    return f"{group} effects: sd of {term} slopes"


#: The priors table's label of the group-sd prior, which every grouping column of a part shares.
ALL_GROUPS_SD_LABEL = "effects of every group: sd"


def corr_label(group: str) -> str:
    """The table label of the correlation of a group's counts and zeros intercepts."""
    return f"{group} effects: counts-zeros correlation"


DISPERSION = "dispersion"
"""The negative binomial's overdispersion alpha."""

DISPERSION_SQRT = "dispersion_sqrt"
"""sqrt(alpha), the variable the dispersion prior is put on."""

#: the response's variable (observed data and pointwise log-likelihood)
RESPONSE = "y"

#: name beginnings of sampled helper variables whose meaning lies in another variable:
#: standardised (non-centred) effects, centred levels and the Beta behind a correlation
RAW_PREFIXES: tuple[str, ...] = tuple(
    f(part, "") for part in PARTS for f in (group_raw, slope_raw, level)) + (corr_raw(""),)


def is_raw(name: str) -> bool:
    """Whether posterior variable ``name`` is a sampled helper, not a quantity to report
    or diagnose: a standardised effect, a centred level, the Beta behind a correlation, or
    coefficients on the internal scale (their user-scale twins are reported).

    Example
    -------
    >>> is_raw("counts_z_reach"), is_raw("counts_effect_reach"), is_raw("zeros_std_coef")
    (True, False, True)
    """
    std = std_coef("")
    return name.startswith(RAW_PREFIXES) or "_chol" in name or name.endswith(std) \
        or f"{std}_" in name


def summary_key(name: str, *coords: object) -> str:
    """The row label of a variable's element in the diagnostics table (``name[a, b]``).

    Example
    -------
    >>> summary_key("counts_coef", "depth"), summary_key("dispersion")
    ('counts_coef[depth]', 'dispersion')
    """
    return f"{name}[{', '.join(map(str, coords))}]" if coords else name
