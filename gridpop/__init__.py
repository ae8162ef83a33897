"""gridpop: spatial grid population simulator for conservation planning.

Public API::

    scenario = gridpop.load_scenario("scenario.toml")
    gridpop.run(scenario, "results/base")
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


__all__ = ["load_scenario", "run", "__version__"]
