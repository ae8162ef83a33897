"""gridpop: spatial grid population simulator for conservation planning.

Public API::

    scenario = gridpop.load_scenario("scenario.toml")
    gridpop.run(scenario, "results/base")
    gridpop.analysis.compare(["base.toml", "reserve.toml"], "results/plans")
"""

from ._version import __version__
from .config import load_scenario


def run(scenario, out_dir, **kwargs):
    """Run a scenario (a path or a loaded scenario) into ``out_dir``; see
    :func:`gridpop.simulation.run.run`."""
    from .simulation.run import run as _run

    if not hasattr(scenario, "sha256"):
        scenario = load_scenario(scenario)
    return _run(scenario, out_dir, **kwargs)


def compare(scenarios, out_dir, **kwargs):
    """Run plans (paths or loaded scenarios) on common random numbers and compare them with the
    first; see :func:`gridpop.analysis.compare.compare`."""
    from .analysis.compare import compare as _compare

    plans = [s if hasattr(s, "sha256") else load_scenario(s) for s in scenarios]
    return _compare(plans, out_dir, **kwargs)


__all__ = ["load_scenario", "run", "compare", "__version__"]
