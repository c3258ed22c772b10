"""Base stocks: a closed vocabulary with the trade's synonyms, mixtures, and which carry an ester carbonyl.

Why closed: a free-text base stock let `polyol-ester` or `POE` slip past the ester
caveats, whose condition named only `ester`. Every spelling is read to one canonical
name here, in rule sets and in sample rows alike, and anything else is refused. A
mixture is written with `+` (`mineral+ester`) and kept in this vocabulary's order.

The family a rule set's caveats test (`base_stock_family`) groups the names by what
matters to FTIR oxidation: any carbonyl ester (diester, polyol ester, or an ester not
further named) puts its own C=O band in the oxidation window (Tribology
Transactions 55 (2012) 872); a phosphate ester has no carbonyl (P=O and P-O-C bands,
standard IR correlation tables, from memory), so it is not in that family.
"""

from __future__ import annotations

# canonical name -> (family, synonyms, lower case, spaces/underscores read as '-')
BASE_STOCKS = {
    "mineral": ("hydrocarbon", ("mineral-oil", "petroleum", "paraffinic", "naphthenic", "group-i", "group-ii",
                                "group-iii", "hydrocracked")),
    "pao": ("hydrocarbon", ("polyalphaolefin", "poly-alpha-olefin", "polyalpha-olefin", "synthetic-hydrocarbon")),
    "ester": ("ester", ("synthetic-ester", "carbonyl-ester")),
    "diester": ("ester", ("dibasic-ester", "di-ester", "dibasic-acid-ester")),
    "polyol-ester": ("ester", ("polyolester", "poe", "polyol", "neopentyl-polyol-ester", "hindered-ester")),
    "phosphate-ester": ("phosphate-ester", ("phosphate", "phosphate-esters", "triaryl-phosphate")),
    "pag": ("pag", ("polyalkylene-glycol", "polyglycol", "polyalkyleneglycol")),
}

ESTER_FAMILY = "ester"
_ORDER = list(BASE_STOCKS)
_LOOKUP = {name: name for name in BASE_STOCKS} | {
    synonym: name for name, (_, synonyms) in BASE_STOCKS.items() for synonym in synonyms}
# The vocabulary's own sentence for messages.
ACCEPTED = ("mineral, pao, ester, diester, polyol-ester, phosphate-ester, pag (synonyms such as POE, PAO, "
            "polyalphaolefin, dibasic ester, polyalkylene glycol), or a mixture joined by '+', e.g. mineral+ester")


class BaseStockError(ValueError):
    """A base stock this vocabulary does not know; the message names the part and what is accepted."""


def canonical_base_stock(text: str) -> str:
    """The canonical spelling of a base stock or mixture; BaseStockError for anything else."""
    parts = [part.strip().lower().replace("_", "-").replace(" ", "-") for part in str(text).split("+")]
    names = []
    for part in parts:
        while "--" in part:
            part = part.replace("--", "-")
        if part not in _LOOKUP:
            raise BaseStockError(f"unknown base stock {part or text!r}: expected {ACCEPTED}")
        names.append(_LOOKUP[part])
    return "+".join(sorted(set(names), key=_ORDER.index))


def base_stock_family(canonical: str) -> str:
    """`ester` when any part carries an ester carbonyl; otherwise the parts' families joined by '+'."""
    families = [BASE_STOCKS[name][0] for name in canonical.split("+")]
    if ESTER_FAMILY in families:
        return ESTER_FAMILY
    return "+".join(dict.fromkeys(families))


def has_ester_carbonyl(canonical: str) -> bool:
    return base_stock_family(canonical) == ESTER_FAMILY


FAMILIES = ("hydrocarbon", "ester", "phosphate-ester", "pag")


def family_of(text) -> str | None:
    """The family of any spelling, or None when it is missing or not in the vocabulary."""
    if not isinstance(text, str):
        return None
    try:
        return base_stock_family(canonical_base_stock(text))
    except BaseStockError:
        return None
