"""Published facts the tests check against, with their source.

Source of every value: TSPLIB, G. Reinelt, "TSPLIB — A Traveling Salesman Problem Library",
ORSA Journal on Computing 3(4):376-384, 1991; its table of optimal tour lengths
(bestSolutions.txt). The instance files are copied unchanged into tests/data/.
"""

from __future__ import annotations

from pathlib import Path

DATA = Path(__file__).parent / "data"

#: TSPLIB published optimal tour lengths (Reinelt 1991, bestSolutions.txt).
TSPLIB_OPTIMUM: dict[str, int] = {
    "burma14": 3323,
    "ulysses16": 6859,
    "gr17": 2085,
    "gr21": 2707,
    "ulysses22": 7013,
    "gr24": 1272,
    "fri26": 937,
    "bayg29": 1610,
    "bays29": 2020,
    "dantzig42": 699,
    "att48": 10628,
    "gr48": 5046,
    "eil51": 426,
    "berlin52": 7542,
    "st70": 675,
    "eil76": 538,
    "pr76": 108159,
    "kroA100": 21282,
}

#: TSPLIB published optima of the asymmetric instances copied here.
TSPLIB_ATSP_OPTIMUM: dict[str, int] = {"br17": 39, "ftv33": 1286}


def instance_path(name: str) -> Path:
    """Path of a copied TSPLIB instance."""
    suffix = ".atsp" if name in TSPLIB_ATSP_OPTIMUM else ".tsp"
    return DATA / f"{name}{suffix}"


def opt_tour_path(name: str) -> Path | None:
    """Path of TSPLIB's optimal tour for `name`, if the library ships one."""
    p = DATA / f"{name}.opt.tour"
    return p if p.exists() else None
