"""Paired comparison of plans: the same landscape and random numbers, different actions.

:func:`compare` runs every plan into a sub-folder of one output folder and writes:

- ``comparison.csv`` and ``comparison.json``: per plan its risk at the horizon, expected minimum
  abundance, final abundance, occupied patches, colonisation of the focus areas and
  metapopulation capacity, with the differences from the first plan and their intervals, and a
  ranking;
- ``occupancy_difference_<plan>.tif``: final-year occupancy probability of each plan minus the
  first plan's;
- ``compare.json``: the manifest (plans, folders, scenario files), ``"complete": true`` last.

Like a run, a comparison is written into a working folder (``.NAME.partial``, with a
``checkpoint.json`` of the plans and settings) and moved into place only when whole, plots
included. Each plan's run is published inside it when whole, so an interrupted comparison resumes
(``resume=True``) with its finished plans kept and the unfinished plan continuing from its
finished batches; the results are the same as an uninterrupted comparison's.

Replicate i of every plan uses the same random numbers (common random numbers: the generator is a
hash of seed, replicate, year, stream and cell, :mod:`gridpop.rng`), so the first plan's seed is
used for all and differences are taken replicate by replicate: per-replicate outcomes are
quasi-extinction by the horizon (yes/no), minimum abundance over the horizon and final abundance,
and :func:`gridpop.analysis.metrics.paired_difference` gives a paired bootstrap interval for each,
with an exact McNemar test for the quasi-extinction risk.

Ranking: plans are ordered by risk at the horizon (lower first), then by expected minimum
abundance (higher first). Walking down that order, a plan starts a new rank only when it is
distinguishable from the first plan of the current rank: its quasi-extinction risk is higher with
McNemar p < 1 - confidence, or (risks not distinguishable) its expected minimum is lower with a
paired interval that excludes 0. Plans sharing a rank are not distinguishable at this replicate
count.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import rasterio

from .._version import __version__
from ..errors import RunStateError, ScenarioError
from ..io.rasters import load_grid
from ..io.results import (
    CHECKPOINT,
    check_output,
    keep_only,
    prepare_output,
    publish_complete,
    working_folder,
    write_json,
    write_stack,
)
from .metrics import paired_difference
from .summary import N_BOOT, focus_census

PAIRING = ("Replicates are paired by common random numbers: replicate i of every plan uses the "
           "same random numbers (seed {seed}), so plans are compared replicate by replicate.")


def _grid(scenario):
    return load_grid(scenario.grid.template, file=scenario.path, key="template")


def _describe(grid) -> str:
    t = grid.transform
    return (f"{grid.crs.to_string()}, {grid.shape[0]} x {grid.shape[1]} cells of "
            f"{t.a:g} x {-t.e:g} from ({t.c:.10g}, {t.f:.10g})")


def prepare_plans(scenarios: list) -> tuple[list, list[str]]:
    """Check that plans can be compared and give them the first plan's seed and risk settings.

    Returns the adjusted scenarios and notes on what was changed.

    Raises
    ------
    ScenarioError
        Fewer than two plans, two files with the same name, different grids (template CRS,
        transform or shape), horizons or replicate counts, fewer than two replicates, or a bad
        ``[risk]`` focus-area layer.
    """
    if len(scenarios) < 2:
        raise ScenarioError("compare needs at least two scenario files (the first is the "
                            f"baseline); got {len(scenarios)}.")
    first = scenarios[0]
    names: dict[str, str] = {}
    for s in scenarios:
        if s.path.stem in names:
            raise ScenarioError(f"{names[s.path.stem]} and {s.path}: plans are named after "
                                f"their file, and both are {s.path.stem!r}; rename one.")
        names[s.path.stem] = s.path
    if first.run.replicates < 2:
        raise ScenarioError(f"{first.path}: [run] replicates = {first.run.replicates}; paired "
                            "differences need at least 2.")
    grid = _grid(first)
    notes, out = [], [first]
    for s in scenarios[1:]:
        g = _grid(s)
        if not (g.crs == grid.crs and g.shape == grid.shape
                and g.transform.almost_equals(grid.transform)):
            raise ScenarioError(f"{first.path} and {s.path}: plans must share the grid; the "
                                f"first has {_describe(grid)}, the other {_describe(g)}.")
        for key in ("years", "replicates"):
            a, b = getattr(first.run, key), getattr(s.run, key)
            if a != b:
                raise ScenarioError(f"{first.path} and {s.path}: [run] {key} = {a} and {b}; "
                                    f"plans are compared over the same {key} (give --{key}).")
        if s.run.seed != first.run.seed:
            notes.append(f"{s.path.stem}: [run] seed {s.run.seed} replaced by {first.run.seed}, "
                         "the first plan's, so that replicates pair up")
            s = s.replace("run", seed=first.run.seed)
        for key in ("quasi_extinction", "confidence"):
            a, b = getattr(first.risk, key), getattr(s.risk, key)
            if a != b:
                notes.append(f"{s.path.stem}: [risk] {key} {b:g} replaced by {a:g}, the first "
                             "plan's")
                s = s.replace("risk", **{key: a})
        out.append(s)
    for i, s in enumerate(out):
        if "occupancy" not in s.output.rasters:
            out[i] = s.replace("output", rasters=[*s.output.rasters, "occupancy"])
            notes.append(f"{s.path.stem}: occupancy.tif written for the difference maps")
        focus_census(s, grid)  # bad focus-area layers fail before anything runs
    return out, notes


def _abundance(run_dir: Path) -> np.ndarray:
    """Total abundance ``(R, T + 1)`` from a run's timeseries.csv."""
    with open(run_dir / "timeseries.csv", newline="") as fh:
        rows = [(int(r["replicate"]), int(r["year"]), float(r["abundance"]))
                for r in csv.DictReader(fh)]
    reps = 1 + max(r[0] for r in rows)
    out = np.full((reps, 1 + max(r[1] for r in rows)), np.nan)
    for rep, year, n in rows:
        out[rep, year] = n
    return out


def _final_band(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:
        return src.read(src.count, masked=True).astype(np.float64).filled(np.nan)


def _difference(d: dict) -> tuple[float, float, float]:
    return d["mean_difference"], d["lo"], d["hi"]


def _row(name, run_dir, summary, diffs, focus_names) -> dict:
    risk, em = summary["risk"], summary["expected_minimum"]
    cap = summary["metapopulation_capacity"]
    row = {"plan": name, "description": summary["plan"]["description"],
           "risk": risk["ever_below"][-1], "risk_lo": risk["ever_below_lo"][-1],
           "risk_hi": risk["ever_below_hi"][-1]}
    row["risk_difference"], row["risk_difference_lo"], row["risk_difference_hi"] = (
        _difference(diffs["quasi_extinct"]))
    row["risk_mcnemar_p"] = diffs["quasi_extinct"]["mcnemar_p"]
    row.update(expected_minimum=em["estimate"], expected_minimum_lo=em["lo"],
               expected_minimum_hi=em["hi"])
    (row["expected_minimum_difference"], row["expected_minimum_difference_lo"],
     row["expected_minimum_difference_hi"]) = _difference(diffs["minimum"])
    row["final_median"] = summary["final_abundance"]["p50"]
    row["final_difference"], row["final_difference_lo"], row["final_difference_hi"] = (
        _difference(diffs["final"]))
    row["patches_occupied"] = summary["occupied_patches"]["mean"][-1]
    for t in focus_names:
        col = summary["colonisation"].get(t)
        row[f"colonisation_{t}"] = col["probability"][-1] if col else None
    row["metapopulation_capacity"] = cap["lambda_M"] if cap else None
    row["folder"] = str(run_dir)
    return row


def _outcomes(abundance: np.ndarray, threshold: float) -> dict:
    return {"quasi_extinct": (abundance < threshold).any(axis=1),
            "minimum": abundance.min(axis=1), "final": abundance[:, -1]}


def _distinct(a: dict, b: dict, alpha: float, seed: int) -> bool:
    """Whether plan ``b`` (ordered after ``a``) is distinguishable from ``a`` for the ranking."""
    risk = paired_difference(a["quasi_extinct"], b["quasi_extinct"], n_boot=N_BOOT,
                             confidence=1 - alpha, seed=seed)
    if risk["mcnemar_p"] < alpha:
        return risk["mean_difference"] > 0
    low = paired_difference(a["minimum"], b["minimum"], n_boot=N_BOOT, confidence=1 - alpha,
                            seed=seed)
    return low["distinguishable"] and low["mean_difference"] < 0


def rank(rows: list[dict], outcomes: list[dict], alpha: float, seed: int) -> list[int]:
    """Ranks (1 = best) of the plans; equal ranks are not distinguishable (module docstring)."""
    order = sorted(range(len(rows)),
                   key=lambda i: (rows[i]["risk"], -rows[i]["expected_minimum"]))
    ranks = [0] * len(rows)
    head, current = order[0], 1
    for i in order:
        if i != head and _distinct(outcomes[head], outcomes[i], alpha, seed):
            head, current = i, current + 1
        ranks[i] = current
    return ranks


def _difference_maps(work: Path, plans: list, grid) -> list[str]:
    base = _final_band(work / plans[0].path.stem / "occupancy.tif")
    files = []
    for s in plans[1:]:
        name = s.path.stem
        diff = _final_band(work / name / "occupancy.tif") - base
        write_stack(work / f"occupancy_difference_{name}.tif", grid, np.isfinite(diff), [diff],
                    [f"final occupancy probability, {name} minus {plans[0].path.stem}"])
        files.append(f"occupancy_difference_{name}.tif")
    return files


COLUMNS_FIXED = ("plan", "description", "risk", "risk_lo", "risk_hi", "risk_difference",
                 "risk_difference_lo", "risk_difference_hi", "risk_mcnemar_p",
                 "expected_minimum", "expected_minimum_lo", "expected_minimum_hi",
                 "expected_minimum_difference", "expected_minimum_difference_lo",
                 "expected_minimum_difference_hi", "final_median", "final_difference",
                 "final_difference_lo", "final_difference_hi", "patches_occupied")


def _csv_value(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.12g}"
    return str(v)


def _identity(plans: list) -> dict:
    """What a resumed comparison must share with the interrupted one (its checkpoint)."""
    from ..simulation.batches import plan_identity

    first = plans[0].run
    return {"gridpop_version": __version__, "seed": first.seed, "years": first.years,
            "replicates": first.replicates,
            "plans": [{"name": s.path.stem, **plan_identity(s)} for s in plans]}


def _may_resume(work: Path, plans: list, *, resume: bool, overwrite: bool) -> bool:
    """Whether the comparison continues the interrupted one in ``work`` (read only).

    Raises
    ------
    RunStateError
        With ``resume`` when the interrupted comparison had other plans (names, order, scenario
        files or parameters as read), seed, years, replicates or gridpop version; without
        ``resume`` or ``overwrite`` when there is an interrupted comparison to lose.
    """
    from ..simulation.batches import interrupted, parameter_changes, version_change

    saved = interrupted(work, resume=resume, overwrite=overwrite)
    if saved is None:
        return False
    then, now = saved.get("plans", []), _identity(plans)["plans"]
    changed = version_change(saved)
    names = [[str(p.get("name")) for p in ps] for ps in (then, now)]
    if names[0] != names[1]:
        changed.append(f"the plans {', '.join(names[0])} then, {', '.join(names[1])} now")
    else:  # the seed, years and replicates are each plan's [run] parameters
        by_change: dict[str, list[str]] = {}
        for old, new in zip(then, now, strict=True):
            if old.get("scenario_sha256") != new["scenario_sha256"]:
                changed.append(f"{new['scenario']}: the scenario file changed (sha256 "
                               f"{str(old.get('scenario_sha256'))[:12]}... then, "
                               f"{new['scenario_sha256'][:12]}... now)")
            for c in parameter_changes(old.get("parameters", {}), new["parameters"]):
                by_change.setdefault(c, []).append(new["name"])
        changed += [f"{c} ({', '.join(n)})" for c, n in by_change.items()]
    if changed:
        raise RunStateError(
            f"{work}: the interrupted comparison had other plans or settings: "
            f"{'; '.join(changed)}. --resume continues only the same plans in the same order "
            "with the same scenario files and settings (command-line overrides included); "
            "restore them, or run without --resume and with --overwrite to start over.")
    return True


def compare(scenarios: list, out_dir, *, overwrite: bool = False, progress: bool = False,
            plots: bool = False, workers: int | None = None, scheduler: str | None = None,
            resume: bool = False, force: bool = False) -> Path:
    """Run plans with common random numbers and compare them with the first.

    Parameters
    ----------
    scenarios : list of gridpop.config.Scenario
        The plans, the baseline first. They must share the grid, the horizon and the replicate
        count; the first plan's seed (and ``[risk]`` threshold and confidence) are used for all.
    out_dir : path
        The output folder: one run folder per plan (named after its file) and the comparison
        files (module docstring). Written beside it and moved into place when complete.
    overwrite : bool
        Replace an existing output folder (and discard an interrupted comparison of it).
    progress : bool
        Show a progress bar per plan.
    plots : bool
        Draw the plots of each run and of the comparison (:mod:`gridpop.report.plots`) before
        the folder is published.
    workers, scheduler, force
        How each plan's run is carried out (:func:`gridpop.simulation.run.run`): on a local Dask
        cluster of ``workers`` processes, on the cluster at ``scheduler``, or despite the room
        check.
    resume : bool
        Continue the interrupted comparison into ``out_dir``: finished plans are kept, the
        unfinished plan resumes from its finished batches. Refused when the plans or settings
        differ (:func:`_may_resume`).

    Returns
    -------
    Path
        The output folder; ``comparison.json`` in it holds the table (see :func:`table`).

    Raises
    ------
    OutputExistsError
        ``out_dir`` exists and ``overwrite`` is false.
    RunStateError
        A changed comparison under ``resume``; an interrupted comparison in the way; and as
        :func:`gridpop.simulation.run.run`.

    References
    ----------
    McNemar, Q. (1947). Note on the sampling error of the difference between correlated
    proportions or percentages. Psychometrika 12, 153-157.
    Law, A. M. and Kelton, W. D. (2000). Simulation Modeling and Analysis, 3rd ed. McGraw-Hill
    (common random numbers).
    """
    from ..simulation.run import run

    out_dir = Path(out_dir)
    plans, notes = prepare_plans(list(scenarios))
    first = plans[0]
    grid = _grid(first)
    check_output(out_dir, overwrite=overwrite)
    resuming = _may_resume(working_folder(out_dir), plans, resume=resume, overwrite=overwrite)
    work = prepare_output(out_dir, overwrite=overwrite, resume=resuming)
    if resuming:  # keep the plans' run folders, finished or not; drop the comparison's files
        keep_only(work, {CHECKPOINT} | {s.path.stem for s in plans}
                  | {working_folder(Path(s.path.stem)).name for s in plans})
    else:
        write_json(work / CHECKPOINT, {**_identity(plans), "complete": False})
    threshold, confidence = first.risk.quasi_extinction, first.risk.confidence
    alpha, seed = 1.0 - confidence, first.run.seed
    rows, outcomes, details, focus = [], [], {}, []
    summaries = []
    for s in plans:
        if not (work / s.path.stem).exists():  # a plan's folder is published only when whole
            run(s, work / s.path.stem, progress=progress, workers=workers, scheduler=scheduler,
                force=force, resume=resuming, plots=plots)
        summary = json.loads((work / s.path.stem / "summary.json").read_text())
        summaries.append(summary)
        focus += [t for t in summary["colonisation"] if t not in focus]
        outcomes.append(_outcomes(_abundance(work / s.path.stem), threshold))
    for s, summary, o in zip(plans, summaries, outcomes, strict=True):
        diffs = {k: paired_difference(outcomes[0][k], o[k], n_boot=N_BOOT,
                                      confidence=confidence, seed=seed) for k in o}
        details[s.path.stem] = diffs
        row = _row(s.path.stem, s.path.stem, summary, diffs, focus)
        row["scenario"] = str(s.path)
        rows.append(row)
    for row, r in zip(rows, rank(rows, outcomes, alpha, seed), strict=True):
        row["rank"] = r
    for row, diffs in zip(rows, details.values(), strict=True):
        row["distinguishable"] = bool(diffs["quasi_extinct"]["mcnemar_p"] < alpha
                                      or diffs["minimum"]["distinguishable"])
    files = _difference_maps(work, plans, grid)
    columns = (list(COLUMNS_FIXED) + [f"colonisation_{t}" for t in focus]
               + ["metapopulation_capacity", "rank", "distinguishable"])
    with open(work / "comparison.csv", "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(columns)
        w.writerows([_csv_value(row[c]) for c in columns] for row in rows)
    comparison = {
        "paired": PAIRING.format(seed=seed), "baseline": first.path.stem, "seed": seed,
        "replicates": first.run.replicates, "years": first.run.years,
        "quasi_extinction": threshold, "confidence": confidence, "notes": notes,
        "ranking": ("Ordered by risk at the horizon, then expected minimum abundance; plans "
                    "with the same rank are not distinguishable at "
                    f"{first.run.replicates} replicates (McNemar p >= {alpha:g} on "
                    "quasi-extinction and a paired interval of the minimum abundance that "
                    "includes 0)."),
        "not_distinguishable": [g for g in _groups(rows) if len(g) > 1],
        "columns": columns, "plans": rows, "differences": details,
    }
    write_json(work / "comparison.json", comparison)
    files += ["comparison.csv", "comparison.json"]
    manifest = {
        "gridpop_version": __version__, "seed": seed, "years": first.run.years,
        "replicates": first.run.replicates,
        "plans": [{"name": s.path.stem, "folder": s.path.stem, "scenario": str(s.path)}
                  for s in plans],
        "files": sorted(files)}
    if plots:
        from ..report.plots import plot_compare

        plot_compare(work, manifest)
    publish_complete(work, out_dir, "compare.json", manifest)
    return out_dir


def _groups(rows: list[dict]) -> list[list[str]]:
    """Plan names by rank, best rank first."""
    groups: dict[int, list[str]] = {}
    for row in sorted(rows, key=lambda r: r["rank"]):
        groups.setdefault(row["rank"], []).append(row["plan"])
    return list(groups.values())


def _interval(v, lo, hi, digits) -> str:
    return f"{v:.{digits}f} [{lo:.{digits}f}, {hi:.{digits}f}]"


def table(comparison: dict) -> str:
    """The comparison as text: one line per plan, then the pairing, ranking and notes."""
    head = ("plan", "risk [CI]", "risk - base [CI]", "McNemar p", "E[min] [CI]",
            "E[min] - base [CI]", "final median", "patches", "lambda_M", "rank")
    lines = []
    for r in comparison["plans"]:
        cap = r["metapopulation_capacity"]
        lines.append((r["plan"], _interval(r["risk"], r["risk_lo"], r["risk_hi"], 3),
                      _interval(r["risk_difference"], r["risk_difference_lo"],
                                r["risk_difference_hi"], 3),
                      f"{r['risk_mcnemar_p']:.3g}",
                      _interval(r["expected_minimum"], r["expected_minimum_lo"],
                                r["expected_minimum_hi"], 1),
                      _interval(r["expected_minimum_difference"],
                                r["expected_minimum_difference_lo"],
                                r["expected_minimum_difference_hi"], 1),
                      f"{r['final_median']:g}", f"{r['patches_occupied']:.2f}",
                      "-" if cap is None else f"{cap:.4g}", str(r["rank"])))
    widths = [max(len(x[i]) for x in [head, *lines]) for i in range(len(head))]
    text = ["  ".join(c.ljust(w) for c, w in zip(x, widths, strict=True)).rstrip()
            for x in [head, *lines]]
    conf = f"{100 * comparison['confidence']:g} %"
    text += ["", f"risk: probability of falling below {comparison['quasi_extinction']:g} "
             f"individuals by year {comparison['years']}; intervals {conf}; base = "
             f"{comparison['baseline']}.", comparison["paired"], comparison["ranking"]]
    text += [f"not distinguishable at {comparison['replicates']} replicates: {', '.join(g)}"
             for g in comparison["not_distinguishable"]]
    text += [f"note: {n}" for n in comparison["notes"]]
    return "\n".join(text)
