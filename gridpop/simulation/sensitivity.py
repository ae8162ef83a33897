"""``gridpop sensitivity``: every plan under every parameter set of one design, and the analyses.

The design (:func:`gridpop.analysis.sensitivity.draw_design`) is drawn once from the
``[uncertainty]`` section, so every plan sees the same parameter sets; every set of every plan
runs with the first plan's ``[run] seed``, so within a set the plans share their random numbers
(common random numbers, as in :mod:`gridpop.analysis.compare`) and the sets differ only in their
parameters. The unit of work is one parameter set: its plans run one after the other in the
same process (in-process, or in one Dask worker), each built from the template and suitability
read once (:func:`gridpop.landscape.read_habitat`) and from the compiled kernels already loaded;
only the ledger is summarised (:func:`gridpop.analysis.summary.summarise`, without the
metapopulation capacity): no stacks, maps or connectivity tables are written per set.
A finished set writes its rows to ``sets/NNNNN.json`` in the working folder (written aside,
then renamed: the checkpoint), so a killed run resumes from the sets in place and gives the
same outputs. The output folder is published only when whole, with ``sensitivity.json``
(``"complete": true``) written last:

- ``samples.csv``: one row per set, the values drawn;
- ``results.csv``: one row per set and plan: risk (probability of falling below ``[risk]
  quasi_extinction`` by the horizon), expected minimum abundance, median final abundance, mean
  occupied patches at the horizon, colonisation probability of each focus area;
- ``sensitivity.csv``: per plan, output and parameter the sensitivity index and its interval
  (:func:`gridpop.analysis.sensitivity.sensitivity_rows`);
- ``ranking.csv``: per ordered pair of plans the fraction of sets in which the first is better
  (lower risk, then higher expected minimum), with the rule that best predicts a flip
  (:func:`gridpop.analysis.sensitivity.pairwise_ranking`);
- ``plots/``: the tornado chart, risk against each parameter and the ranking matrix.
"""

from __future__ import annotations

import contextlib
import csv
import dataclasses
import json
import os
import shutil
import uuid
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._version import __version__
from ..analysis.compare import outcome_columns, prepare_plans
from ..analysis.sensitivity import (
    RANKING_COLUMNS,
    SENSITIVITY_COLUMNS,
    Design,
    draw_design,
    pairwise_ranking,
    sensitivity_rows,
)
from ..analysis.summary import focus_census, summarise
from ..config import Scenario, UncertaintyConfig, apply_parameters
from ..errors import RunStateError, ScenarioWarning
from ..io.results import check_output, prepare_output, publish, working_folder, write_json
from ..landscape import Habitat, build_landscape, read_habitat
from .batches import batch_folder, interrupted, run_batch
from .distributed import check_execution
from .model import build_model

MANIFEST = "sensitivity.json"
CHECKPOINT = "sensitivity_checkpoint.json"
OUTPUTS = ("risk", "expected_minimum", "final_median", "patches_occupied")

CAVEATS = (
    "Sensitivity indices describe this model over the ranges given, not the species: a "
    "parameter left out or given a narrow range cannot show up as important.",
    "Each set's outcomes are estimated from a finite number of replicates; with common random "
    "numbers across sets this noise is shared rather than independent, but it still blurs small "
    "indices and flips between plans of nearly equal risk.",
    "The ranking fraction counts parameter sets, each drawn from the ranges given; it is a "
    "share of the plausible parameter space under those ranges, not a probability that a plan "
    "is better in the field. Sobol and Morris designs are not simple random samples, so their "
    "fractions and intervals are approximate.",
    "The flip rule is a single threshold on one parameter, the best of all parameters and "
    "thresholds on these sets; it points to where the ranking changes, and other parameters "
    "may matter jointly.",
)


@dataclass(frozen=True)
class Study:
    """What every set needs: the plans (prepared for pairing), the habitat read once per plan,
    the design and the focus-area names."""

    plans: tuple[Scenario, ...]
    habitats: tuple[Habitat, ...]
    design: Design
    focus: tuple[str, ...]

    @property
    def names(self) -> list[str]:
        return [s.path.stem for s in self.plans]

    @property
    def columns(self) -> list[str]:
        return list(OUTPUTS) + [f"colonisation_{t}" for t in self.focus]


def set_file(work: Path, index: int) -> Path:
    return Path(work) / "sets" / f"{index:05d}.json"


def run_set(study: Study, index: int, work: Path) -> int:
    """Run every plan under parameter set ``index``; write its rows to :func:`set_file` (aside,
    then renamed). Returns ``index``."""
    values = dict(zip(study.design.names, map(float, study.design.values[index]), strict=True))
    rows = []
    for plan, habitat in zip(study.plans, study.habitats, strict=True):
        s = apply_parameters(plan, values)
        with warnings.catch_warnings():  # said once per plan, before the sets run
            warnings.simplefilter("ignore", ScenarioWarning)
            model = build_model(s, build_landscape(s, stochastic=s.growth.stochastic,
                                                   habitat=habitat))
        tmp = Path(work) / "sets" / f"{index:05d}.{s.path.stem}.{uuid.uuid4().hex[:12]}.tmp"
        parts = [batch_folder(tmp, b) for b in range(len(model.plan.batches()))]
        for part, reps in zip(parts, model.plan.batches(), strict=True):
            run_batch(model, reps, part)
        ledger = np.concatenate([np.load(p / "ledger.npy") for p in parts], axis=0)
        focus = (np.concatenate([np.load(p / "focus.npy") for p in parts], axis=0)
                 if model.census.focus is not None else None)
        summary = summarise(s, model, ledger, focus, capacity=False)
        rows.append({"set": index, "plan": s.path.stem,
                     **{k: None if v is None else float(v)
                        for k, v in outcome_columns(summary, study.focus).items()}})
        shutil.rmtree(tmp)
    final = set_file(work, index)
    tmp_file = final.with_name(f"{final.name}.{uuid.uuid4().hex[:12]}.tmp")
    tmp_file.write_text(json.dumps(rows))
    os.replace(tmp_file, final)
    return index


def finished_sets(work: Path, n: int) -> set[int]:
    folder = Path(work) / "sets"
    if not folder.is_dir():
        return set()
    return {int(p.stem) for p in folder.glob("*.json") if p.stem.isdigit() and int(p.stem) < n}


def _prepare(scenarios: list[Scenario], replicates: int | None, years: int | None
             ) -> tuple[list[Scenario], list[str]]:
    """Plans with the overrides, the first plan's seed and risk settings, nothing written per
    set but the summary."""
    plans = []
    for s in scenarios:
        over = {k: v for k, v in (("replicates", replicates), ("years", years)) if v is not None}
        s = s.replace("run", **over) if over else s
        plans.append(s.replace("output", rasters=["occupancy"]))  # as compare wants them
    notes: list[str] = []
    if len(plans) > 1:
        plans, notes = prepare_plans(plans)
    return [s.replace("output", rasters=[], patches_csv=False) for s in plans], notes


def _identity(plans, u: UncertaintyConfig, n: int) -> dict:
    return {"gridpop_version": __version__,
            "plans": [{"scenario": str(s.path), "scenario_sha256": s.sha256} for s in plans],
            "uncertainty": json.loads(json.dumps(dataclasses.asdict(u))),
            "years": plans[0].run.years, "replicates": plans[0].run.replicates,
            "seed": plans[0].run.seed, "sets": n}


def _may_resume(work: Path, identity: dict, *, resume: bool, overwrite: bool) -> bool:
    saved = interrupted(work, resume=resume, overwrite=overwrite, checkpoint=CHECKPOINT)
    if saved is None:
        return False
    changed = [k for k in identity if saved.get(k) != identity[k]]
    if changed:
        raise RunStateError(f"{work}: the interrupted sensitivity analysis had other "
                            f"{', '.join(changed)} (scenario files, [uncertainty], --years, "
                            "--replicates or gridpop version); --resume needs the same. Or run "
                            "without --resume and with --overwrite to start over.")
    return True


def _run_sets(study: Study, todo: list[int], work: Path, client, progress) -> None:
    if client is None:
        for i in todo:
            run_set(study, i, work)
            progress.update(1)
        return
    from distributed import as_completed

    shared = client.scatter(study, broadcast=True)
    token = uuid.uuid4().hex[:8]
    futures = [client.submit(run_set, shared, i, work, key=f"gridpop-set-{i:05d}-{token}")
               for i in todo]
    try:
        for future in as_completed(futures):
            future.result()  # raises the task's exception
            progress.update(1)
    finally:
        client.cancel(futures)


def _write_csv(path: Path, columns, rows) -> None:
    def cell(v):
        if v is None or (isinstance(v, float) and not np.isfinite(v)):
            return ""
        return f"{v:.12g}" if isinstance(v, float) else str(v)

    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(columns)
        w.writerows([cell(r.get(c)) for c in columns] for r in rows)


def _analyse(work: Path, study: Study, rows: list[dict], confidence: float, seed: int
             ) -> list[str]:
    design = study.design
    _write_csv(work / "samples.csv", ["set", *design.names],
               [{"set": i, **dict(zip(design.names, map(float, v), strict=True))}
                for i, v in enumerate(design.values)])
    _write_csv(work / "results.csv", ["set", "plan", *study.columns], rows)
    table = {name: {c: np.array([np.nan if r[c] is None else r[c] for r in rows
                                 if r["plan"] == name], dtype=np.float64)
                    for c in study.columns} for name in study.names}
    sens = [row for name in study.names for c in study.columns
            if np.all(np.isfinite(table[name][c]))
            for row in sensitivity_rows(design, name, c, table[name][c],
                                        confidence=confidence, seed=seed)]
    _write_csv(work / "sensitivity.csv", SENSITIVITY_COLUMNS, sens)
    ranking = pairwise_ranking(design, {n: table[n]["risk"] for n in study.names},
                               {n: table[n]["expected_minimum"] for n in study.names},
                               confidence=confidence)
    _write_csv(work / "ranking.csv", RANKING_COLUMNS, ranking)
    return ["samples.csv", "results.csv", "sensitivity.csv", "ranking.csv"]


def sensitivity(scenarios: list[Scenario], uncertainty: UncertaintyConfig, out_dir, *,
                overwrite: bool = False, progress: bool = False, workers: int | None = None,
                scheduler: str | None = None, resume: bool = False,
                replicates: int | None = None, years: int | None = None,
                plots: bool = True) -> Path:
    """Run every plan under every parameter set of the design and write the analyses into
    ``out_dir`` (module docstring); return it.

    Parameters
    ----------
    scenarios : list of Scenario
        The plans (one or more); parameters already checked against them
        (:func:`gridpop.config.load_study`).
    uncertainty : UncertaintyConfig
    out_dir : path
    overwrite, progress, workers, scheduler, resume
        As for :func:`gridpop.simulation.run.run`; the unit of work is a parameter set.
    replicates, years : int, optional
        Override ``[run]`` replicates and years of every plan.
    plots : bool
        Draw the plots into ``out_dir/plots`` before the folder is published.

    Raises
    ------
    ScenarioError, InputDataError
        A plan or layer that cannot be used (before anything runs).
    OutputExistsError, RunStateError
        As for :func:`gridpop.simulation.run.run`.
    """
    from tqdm import tqdm

    out_dir = Path(out_dir)
    check_execution(workers, scheduler)
    check_output(out_dir, overwrite=overwrite)
    plans, notes = _prepare(list(scenarios), replicates, years)
    first = plans[0]
    design = draw_design(uncertainty)
    for s in plans:  # every set must be valid for every plan before anything runs
        for row in design.values:
            apply_parameters(s, dict(zip(design.names, map(float, row), strict=True)))
    habitats: dict[tuple, Habitat] = {}
    for s in plans:
        key = (s.grid.template, s.habitat.suitability)
        habitats.setdefault(key, read_habitat(s))
        # built once here for the plan's own warnings; the sets' models keep quiet
        build_model(s, build_landscape(s, stochastic=s.growth.stochastic, habitat=habitats[key]))
    grid = next(iter(habitats.values())).grid
    focus: list[str] = []
    for s in plans:
        census = focus_census(s, grid)
        focus += [t for t in (census.names if census else ()) if t not in focus]
    study = Study(tuple(plans), tuple(habitats[(s.grid.template, s.habitat.suitability)]
                                      for s in plans), design, tuple(focus))
    identity = _identity(plans, uncertainty, design.n)
    work = working_folder(out_dir)
    resuming = _may_resume(work, identity, resume=resume, overwrite=overwrite)
    done = finished_sets(work, design.n) if resuming else set()
    cluster: contextlib.AbstractContextManager
    if workers is None and scheduler is None:
        cluster = contextlib.nullcontext()
    else:
        from .distributed import cluster_client

        cluster = cluster_client(workers=workers, scheduler=scheduler)
    with cluster as client:
        work = prepare_output(out_dir, overwrite=overwrite, resume=resuming)
        if not resuming:
            write_json(work / CHECKPOINT, {**identity, "complete": False})
        (work / "sets").mkdir(exist_ok=True)
        for p in (work / "sets").iterdir():  # pieces of sets that were interrupted
            if not (p.suffix == ".json" and p.stem.isdigit()):
                shutil.rmtree(p) if p.is_dir() else p.unlink()
        todo = [i for i in range(design.n) if i not in done]
        with tqdm(total=design.n, initial=design.n - len(todo), unit="set",
                  disable=not progress, desc="gridpop sensitivity") as bar:
            _run_sets(study, todo, work, client, bar)
    rows = [r for i in range(design.n) for r in json.loads(set_file(work, i).read_text())]
    confidence, seed = first.risk.confidence, uncertainty.seed
    files = _analyse(work, study, rows, confidence, seed)
    shutil.rmtree(work / "sets")
    manifest = {
        "gridpop_version": __version__, "kind": "sensitivity",
        "plans": [{"name": s.path.stem, "scenario": str(s.path),
                   "description": s.plan.description} for s in plans],
        "design": uncertainty.design, "design_seed": uncertainty.seed,
        "samples": uncertainty.samples, "sets": design.n,
        "parameters": [{"name": p.name, "distribution": p.distribution, "args": list(p.args)}
                       for p in uncertainty.parameters],
        "seed": first.run.seed, "years": first.run.years, "replicates": first.run.replicates,
        "quasi_extinction": first.risk.quasi_extinction, "confidence": confidence,
        "outputs": study.columns, "notes": notes, "caveats": list(CAVEATS),
        "pairing": ("Every set of every plan runs with seed "
                    f"{first.run.seed}: within a set the plans share their random numbers, "
                    "and the sets differ only in their parameters."),
        "ties": ("In ranking.csv a plan is better in a set when its risk is lower or, with the "
                 "same risk, its expected minimum abundance is higher (as in compare); a set "
                 "with both the same counts half."),
        "execution": {"mode": ("in-process" if client is None else "local cluster"
                               if workers is not None else "scheduler"),
                      "workers": workers, "resumed_sets": len(done)},
    }
    if plots:
        from ..report.sensitivity import plot_sensitivity

        files += [str(p.relative_to(work)) for p in plot_sensitivity(work, manifest)]
    write_json(work / MANIFEST, {**manifest, "files": sorted(files), "complete": True})
    (work / CHECKPOINT).unlink()
    publish(work, out_dir)
    return out_dir
