# SPDX-License-Identifier: MIT
"""Calibrations: what a published version holds, and predictions from it for scalars or
numpy arrays. Every number comes from the library (rungcal/calibration/*.hpp)."""

import json
import os

import numpy as np

from . import _rungcal
from ._input import input_error


class Calibration:
    """A published calibration (one version of a named calibration in a store).

    name, version, label ("name@version"), relations (names), parameters
    ({relation: {parameter: {"value", "error", "mode", ...}}}, errors from the covariance),
    covariance(relation) and parameter_names(relation), provenance, warnings
    ({relation: [...]}, and "joint" for a joint fit), published_utc, content_sha256, and document (the whole file).
    """

    def __init__(self, core):
        self._core = core
        self.document = json.loads(core.document_json())

    def __repr__(self):
        return f"<rungcal.Calibration {self.label}: {', '.join(self.relations)}>"

    name = property(lambda self: self._core.name)
    version = property(lambda self: self._core.version)
    label = property(lambda self: self._core.label)
    relations = property(lambda self: list(self._core.relation_names))
    published_utc = property(lambda self: self.document.get("published_utc"))
    content_sha256 = property(lambda self: self.document.get("content_sha256"))
    provenance = property(lambda self: self.document["fit"].get("provenance", {}))

    def _relation(self, relation):
        for r in self.document["fit"]["relations"]:
            if r["name"] == relation:
                return r
        raise input_error("unknown_relation", "the calibration has no relation of this name; it has "
                          + ", ".join(self.relations), file=self.label, key=relation)

    @property
    def parameters(self):
        return {r["name"]: {p["name"]: p for p in r["parameters"]} for r in self.document["fit"]["relations"]}

    @property
    def warnings(self):
        fit = self.document["fit"]
        out = {r["name"]: list(r.get("warnings", [])) for r in fit["relations"]}
        if isinstance(fit.get("joint"), dict):
            out["joint"] = list(fit["joint"].get("warnings", []))
        return out

    def parameter_names(self, relation):
        return list(self._relation(relation)["parameter_names"])

    def covariance(self, relation):
        """The relation's covariance in parameter_names order (NaN where undefined)."""
        rows = self._relation(relation)["covariance"]
        return np.array([[np.nan if v is None else v for v in row] for row in rows], dtype=float)

    def absolute_magnitude(self, relation, log_period, feh=0.0):
        """(M, calibration error) at log10 P (days) and [Fe/H] (NaN or None: none given);
        floats for scalars, arrays of the broadcast shape for arrays."""
        shape, (p, f) = _broadcast(self.label, log_period=log_period, feh=feh)
        value, error = self._core.absolute_magnitudes(relation, p, f)
        return _shaped(shape, value, error)

    def distance_modulus(self, relation, m0, log_period, feh=0.0, m0_err=0.0):
        """(mu, statistical error, calibration error) of a target of dereddened (or Wesenheit)
        magnitude m0 as rungcal-apply takes each star's: the statistical error holds m0_err and
        the intrinsic scatter, the calibration error is common to every star."""
        shape, (m, p, f, e) = _broadcast(self.label, m0=m0, log_period=log_period, feh=feh, m0_err=m0_err)
        mu, stat, cal = self._core.distance_moduli(relation, m, p, f, e)
        return _shaped(shape, mu, stat, cal)


def _as_float_array(name, value, label):
    if value is None:
        return np.asarray(np.nan)
    try:
        return np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise input_error("not_a_number", "must be a number or an array of numbers", file=label, key=name) from None


def _broadcast(label, **arrays):
    """The arguments broadcast to one shape, flattened; InputError "shape_mismatch" else."""
    values = [_as_float_array(name, value, label) for name, value in arrays.items()]
    try:
        broadcast = np.broadcast_arrays(*values)
    except ValueError:
        shapes = ", ".join(f"{n} {v.shape}" for n, v in zip(arrays, values))
        raise input_error("shape_mismatch", f"the arrays' shapes do not broadcast together: {shapes}",
                          file=label, key=",".join(arrays)) from None
    shape = broadcast[0].shape
    return shape, [np.ascontiguousarray(b, dtype=float).ravel() for b in broadcast]


def _shaped(shape, *flat):
    if shape == ():
        return tuple(float(a[0]) for a in flat)
    return tuple(np.asarray(a).reshape(shape) for a in flat)


def load_calibration(reference):
    """A calibration from "STORE/NAME@latest", "STORE/NAME@N", "STORE/NAME", a version
    folder (STORE/NAME/vNNNN) or a calibration file (calibration.json)."""
    return Calibration(_rungcal.load_calibration(os.fspath(reference)))
