"""Writing mean-field results to files, atomically (a temporary file renamed into place)."""

from __future__ import annotations

import csv
import io
import math

from crn.io.atomic import write_atomic

__all__ = ["write_mean_field_csv", "mean_field_csv", "mean_field_json", "fixed_point_json",
           "free_species"]


def mean_field_csv(result) -> str:
    """CSV text: a ``time`` column, then one column per species (the result's values).

    Parameters
    ----------
    result : crn.solvers.ode.MeanFieldResult

    Returns
    -------
    str
        A header row, then one row per time point, numbers written with ``repr``.
    """
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(["time", *result.species])
    for t, row in zip(result.times, result.values, strict=True):
        writer.writerow([repr(float(t)), *(repr(float(v)) for v in row)])
    return out.getvalue()


def write_mean_field_csv(path, result) -> None:
    """Write :func:`mean_field_csv` to ``path`` atomically.

    Parameters
    ----------
    path : str or Path
        The CSV file to create or replace.
    result : crn.solvers.ode.MeanFieldResult

    Raises
    ------
    CRNError
        When the file cannot be written.
    """
    text = mean_field_csv(result)
    write_atomic(path, text)


def mean_field_json(model, result, fixed_points, *, consensus=None) -> dict:
    """The ``crn ode --json`` object (docs/design.md CLI contract) of a mean-field solve.

    Parameters
    ----------
    model : crn.core.model.Model
        The loaded model (its ``name`` and ``network`` are used).
    result : MeanFieldResult
        The solve whose ``times`` and ``fractions`` (shape ``(n_times,)`` per
        species) are reported.
    fixed_points : list of FixedPoint or None
        From :func:`crn.solvers.fixed_points.find_fixed_points`; None when not searched
        (reported as null).
    consensus : RunOutcome, optional
        The consensus to report instead of ``result.consensus`` (``crn compare``
        reports its sampled window beside the consensus of its stop-at-consensus solve).

    Returns
    -------
    dict
        At least ``times``, ``fractions`` (name -> list), ``consensus``
        (``{label, time}`` or None) and ``fixed_points``; plus ``model``, ``units``,
        ``molecules_per_unit``, ``method``, ``status``, ``message``, ``final_label``,
        ``held``, ``correct`` and, for a network, ``concentrations``. Values may be
        numpy arrays: pass it through ``emit_json``/``to_jsonable``.
    """
    from crn.core.outcome import correct_label

    net = model.network
    outcome = result.consensus if consensus is None else consensus
    obj = {
        "model": model.name,
        "units": result.units,
        "molecules_per_unit": result.molecules_per_unit,
        "method": result.method,
        "status": result.status,
        "message": result.message,
        "times": result.times,
        "fractions": result.fractions,
        "consensus": (None if outcome.label is None
                      else {"label": outcome.label, "time": outcome.time}),
        "final_label": outcome.final_label,
        "held": outcome.held,
        "correct": correct_label(net),
        "fixed_points": None if fixed_points is None else [fixed_point_json(p, net.species)
                                                           for p in fixed_points],
    }
    if result.units == "concentration":
        obj["concentrations"] = {s: result.values[:, i] for i, s in enumerate(net.species)}
    return obj


def _number(x: float):
    x = float(x)
    return x if math.isfinite(x) else None


def _eigenvalue(z: complex, tol: float = 1e-7):
    z = complex(z)
    return _number(z.real) if abs(z.imag) <= tol * max(1.0, abs(z)) else {
        "re": _number(z.real), "im": _number(z.imag)}


def free_species(point, species) -> list[str]:
    """Species left free along a continuum of fixed points (the others follow from them)."""
    if point.exact is not None:
        return [s for s in species if point.exact[s] == s]
    return [s for s, v in zip(species, point.point, strict=True) if not math.isfinite(v)]


def fixed_point_json(point, species) -> dict:
    """The JSON object of one fixed point (:class:`crn.solvers.fixed_points.FixedPoint`)."""
    return {
        "point": {s: _number(v) for s, v in zip(species, point.point, strict=True)},
        "classification": point.classification,
        "eigenvalues": [_eigenvalue(z) for z in point.eigenvalues],
        "unstable_directions": [{s: _number(v) for s, v in zip(species, d, strict=True)}
                                for d in point.unstable_directions],
        "consensus": point.consensus,
        "tie": point.tie,
        "exact": point.exact,
        "free": free_species(point, species),
    }
