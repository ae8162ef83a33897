"""The report's account of a stage-structured life history: the matrix, its diagnostics and
what the model assumes of stages and sexes, from a plan's parameters as read."""

from __future__ import annotations

import numpy as np

from .. import matrices

MATING = {"monogamous": "the harmonic mean 2FM / (F + M) of the breeding females F and males M "
                        "(Caswell and Weeks 1986)",
          "polygynous": "min(F, {harem_size:g} M) of the breeding females F and males M"}


def stage_texts(params: dict) -> dict[str, str]:
    """Sentences that replace the stage-free ones of :func:`gridpop.report.assumptions.
    assumptions` for a plan with [stages]: "Population", "Growth", "Life history" (the matrix
    and its diagnostics) and "leaving" (who disperses); {} without [stages]."""
    st = params.get("stages")
    if not st:
        return {}
    g, sex = params["growth"], params.get("sex", {"system": "female-only"})
    names = list(st["names"])
    t, f = np.array(st["transitions"]), np.array(st["fecundity"])
    both = sex["system"] != "female-only"
    counted = ", ".join(st["abundance_stages"] or names)
    population = (
        f"Each grid cell holds a number of individuals per stage ({', '.join(names)})"
        + (", separately for females and males" if both else ", one sex (the matrix as given)")
        + f"; abundance, risk and occupancy count {counted}. Individuals within a stage are "
          "alike; no genetics.")
    dens = ", ".join(st["density_stages"] or names)
    growth = (
        f"A projection matrix per cell: survival and stage transitions from transitions, births "
        f"from fecundity. Crowding ({g['model']}) scales {st['density_acts_on']} by a factor of "
        f"the total of {dens} against K, chosen so that an isolated cell without noise settles at "
        "K. " + ("Stochastic: survivors binomial, stage transitions multinomial and births "
                 "Poisson, whole individuals." if g["stochastic"] else
                 "Deterministic: expected numbers."))
    if both:
        growth += (f" Only females breed; births come from {MATING[sex['system']].format(**sex)}"
                   f", a fraction {sex['female_fraction_at_birth']:g} of them female.")
    rows = "; ".join(" ".join(f"{x:g}" for x in r) for r in t)
    frows = "; ".join(" ".join(f"{x:g}" for x in r) for r in f)
    life = (f"transitions (rows: to stage, columns: from stage {', '.join(names)}): {rows}. "
            f"fecundity: {frows}. " + " ".join(
                line.strip() for line in matrices.describe(names, t, f)))
    fractions = st["dispersal_fraction"] or [params["dispersal"]["fraction"]] * len(names)
    leaving = ("Each year a fraction of each stage's individuals ("
               + ", ".join(f"{n} {x:g}" for n, x in zip(names, fractions, strict=True))
               + ") leave their cell and ")
    return {"Population": population, "Growth": growth, "Life history": life,
            "leaving": leaving, "moves": str(max(fractions) > 0)}


def managed_phrase(c: dict) -> str:
    """A release or removal of the parameters as read, in a phrase."""
    who = f"{c['stage']} individuals" if c.get("stage") else "individuals"
    if c["kind"] == "release":
        source = f", taken from the wild in {c['source_area']}" if c.get("source_area") else ""
        years = ", ".join(f"{y:g}" for y in c["years"])
        return (f"{c['count']} {who} released in years {years}{source}, spread over the area's "
                "habitat by capacity")
    amount = f"a fraction {c['fraction']:g} of the" if c.get("fraction") is not None else \
        f"{c['count']}"
    return f"{amount} {who} removed every year from year {c['start_year']}"
