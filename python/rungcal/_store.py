# SPDX-License-Identifier: MIT
"""A calibration store (rungcal-publish's folders) as data: names, versions, 'latest', the
withdrawn versions, and the diff of two versions as rungcal-diff prints it."""

import os

from . import _rungcal
from ._calibration import Calibration
from ._input import input_error


class Store:
    """STORE/NAME/vNNNN/ folders. Methods taking name=None use the store's only calibration."""

    def __init__(self, path):
        self.path = os.fspath(path)
        if not os.path.isdir(self.path):
            raise input_error("unknown_calibration", "no such store folder", file=self.path)

    def __repr__(self):
        return f"<rungcal.Store {self.path}: {', '.join(self.names())}>"

    def names(self):
        """The calibrations in the store (folders holding at least one version)."""
        return sorted(n for n in os.listdir(self.path)
                      if os.path.isdir(os.path.join(self.path, n)) and _rungcal.calibration_versions(self.path, n))

    def _name(self, name):
        names = self.names()
        if name is not None:
            if name not in names:
                raise input_error("unknown_calibration", "the store has no calibration of this name; it has "
                                  + (", ".join(names) or "none"), file=self.path, key=name)
            return name
        if len(names) != 1:
            raise input_error("calibration_name_needed",
                              f"the store holds {len(names)} calibrations ({', '.join(names)}): give name=",
                              file=self.path, key="name")
        return names[0]

    def versions(self, name=None):
        """The versions present, ascending (withdrawn ones included)."""
        return list(_rungcal.calibration_versions(self.path, self._name(name)))

    def latest(self, name=None):
        """The version 'latest' names, or None."""
        return _rungcal.latest_version(self.path, self._name(name))

    def withdrawn(self, name=None):
        """[{"version", "content_sha256", "withdrawn_utc"}] of the versions rolled back."""
        return _rungcal.withdrawn_versions(self.path, self._name(name))

    def history(self, name=None):
        """Per version: version, published_utc, content_sha256, latest and withdrawn flags."""
        name = self._name(name)
        latest, withdrawn = self.latest(name), {w["version"] for w in self.withdrawn(name)}
        out = []
        for v in self.versions(name):
            cal = self.load(f"{name}@{v}")
            out.append({"version": v, "published_utc": cal.published_utc, "content_sha256": cal.content_sha256,
                        "latest": v == latest, "withdrawn": v in withdrawn})
        return out

    def _reference(self, which, name):
        if isinstance(which, int):
            return f"{self._name(name)}@{which}"
        which = str(which)
        if "@" in which:
            return which
        if which == "latest" or which.isdigit():
            return f"{self._name(name)}@{which}"
        return f"{which}@latest"

    def load(self, which="latest", name=None):
        """A version: N, "latest", "name@N", "name@latest" or a name (its latest)."""
        return Calibration(_rungcal.load_calibration(f"{self.path}/{self._reference(which, name)}"))

    def diff(self, a=None, b="latest", name=None):
        """What changed from version a to version b, as data: from, to, shifts (relation,
        parameter, from, to, from_error, to_error, shift, shift_in_sigma), inputs (what, path,
        from_sha256, to_sha256), config_changed, entered and left ({relation: [ids]}),
        max_shift_in_sigma, and text (rungcal-diff's printout). a=None: the version before b."""
        to_ref = self._reference(b, name)
        if a is None:
            newer = self.load(to_ref)
            previous = newer.document.get("previous")
            if not previous:
                raise input_error("no_previous_version", "this is the first version: give a", file=to_ref)
            from_ref = f"{newer.name}@{previous['version']}"
        else:
            from_ref = self._reference(a, name)
        return _rungcal.diff_versions(self.path, from_ref, to_ref)
