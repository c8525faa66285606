"""simloop: method-of-moments design of tuned, tapped medium-wave receiving loops.

Notebook API::

    import simloop
    spec = simloop.load("geometries/shed-loop.toml")
    result = simloop.sweep(spec)          # SweepResult; result.to_network() is an skrf.Network
    chart = simloop.tune(spec, result)    # TuneResult
    check = simloop.validate(spec, result)  # ValidationResult
    link = simloop.couple(spec, result)     # CoupleResult: boost, placement, loop-radio 2-port
    nulls = simloop.pattern(spec, result)   # PatternResult: receive patterns and their nulls
    whole = simloop.study(spec)             # StudyResult: all of the above sharing every solve
    simloop.report_html.write_report(whole, pathlib.Path("out"))  # report.html
"""

from simloop.errors import SimloopError, SolverError, SpecError, ValidityWarning

__version__ = "0.1.0"


def load(path):
    """Load and validate a spec file (TOML). See :func:`simloop.spec.load`."""
    from simloop.spec import load as _load

    return _load(path)


def sweep(spec, **kwargs):
    """Impedance sweep of every tap. See :func:`simloop.impedance.run_sweep`."""
    from simloop.impedance import run_sweep

    return run_sweep(spec, **kwargs)


def tune(spec, sweep_result, band="itu-1", field_v_per_m=1e-3):
    """Band coverage and channel chart from a sweep. See :func:`simloop.tuning.run_tune`."""
    from simloop.tuning import run_tune
    from simloop.units import parse_band_raster

    if isinstance(band, str) and ":" in band:  # "530k:1700k:10k" as on the command line
        band = parse_band_raster(band)
    return run_tune(spec, sweep_result, band=band, field_v_per_m=field_v_per_m)


def couple(spec, sweep=None, tune=None, **kwargs):
    """Loop-to-radio coupling (boost, placement, 2-port); runs the sweep and the tuning chart
    when not given. See :func:`simloop.coupling.run_couple` for the keywords."""
    from simloop.coupling import run_couple

    sweep = sweep if sweep is not None else globals()["sweep"](spec)
    tune = tune if tune is not None else globals()["tune"](spec, sweep)
    return run_couple(spec, sweep, tune, **kwargs)


def pattern(spec, sweep=None, **kwargs):
    """Receive patterns of the loop and the radio's rod, their nulls and what fills them; runs the
    sweep when not given. See :func:`simloop.patterns.run_pattern` for the keywords."""
    from simloop.patterns import check_pattern_inputs, run_pattern

    check_pattern_inputs(spec)
    sweep = sweep if sweep is not None else globals()["sweep"](spec)
    return run_pattern(spec, sweep, **kwargs)


def study(spec, **kwargs):
    """Sweep, tune, validate, couple and pattern in one pass sharing every MoM solve; a spec or
    a spec file's path. See :func:`simloop.studies.run_study` for the keywords (``workers``,
    ``cache``, ``band``, ``field_v_per_m``, ``convergence``)."""
    from simloop.studies import run_study

    if not hasattr(spec, "taps"):  # a path: load it, and digest the file as read
        spec = load(spec)
    return run_study(spec, **kwargs)


def validate(spec, sweep_result, **kwargs):
    """MoM against the quasi-static model and handbook formulas. See :func:`simloop.validation.run_validate`."""
    from simloop.validation import run_validate

    return run_validate(spec, sweep_result, **kwargs)


__all__ = ["SimloopError", "SolverError", "SpecError", "ValidityWarning", "__version__", "couple", "load", "pattern", "study", "sweep", "tune", "validate"]
