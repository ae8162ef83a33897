"""gridpop: spatial grid population simulator for conservation planning.

Public API::

    scenario = gridpop.load_scenario("scenario.toml")
    gridpop.run(scenario, "results/base")
    gridpop.compare(["base.toml", "reserve.toml"], "results/plans")
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("gridpop")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+unknown"

from .scenario import load_scenario  # noqa: E402


def run(scenario, out_dir, **kwargs):
    """Run a scenario (a path or a loaded scenario) into ``out_dir``; see :func:`engine.run`."""
    from .engine import run as _run

    if not hasattr(scenario, "sha256"):
        scenario = load_scenario(scenario)
    return _run(scenario, out_dir, **kwargs)


def compare(scenarios, out_dir, **kwargs):
    """Run plans (paths or loaded scenarios) on common random numbers and compare them with the
    first; see :func:`compare.compare`."""
    from .compare import compare as _compare

    plans = [s if hasattr(s, "sha256") else load_scenario(s) for s in scenarios]
    return _compare(plans, out_dir, **kwargs)


__all__ = ["load_scenario", "run", "compare", "__version__"]
