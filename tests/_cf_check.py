"""CF-1.8 checks of beltkit outputs with the IOOS compliance checker (a test helper, no tests).

The reference here is the IOOS compliance checker (``compliance-checker`` from
the package index) with its ``cf:1.8`` suite. It parses units with cf-units,
whose wheels bundle the UDUNITS-2 C library, so it needs nothing beyond pip:
no system library. It reads the CF standard-name table shipped inside the
package (beltkit's files name no ``standard_name_vocabulary`` version, so it
downloads nothing).

The checker ranks what it finds: high priority is a CF "must" (an error),
medium a "should" (a warning), low a suggestion. A file passes here when

* every check ran (none raised),
* no high-priority check failed: zero errors against CF-1.8,
* no medium-priority check failed except one recommendation, CF-1.8 §2.4:
  "All other dimensions should, whenever possible, be placed to the left of
  the spatiotemporal dimensions". beltkit's outputs are time-major
  (``(time, energy)``: summaries are streamed slab by slab along ``time``),
  so that recommendation is knowingly not followed. Only that case is let
  through: the spatiotemporal dimensions themselves must still be in the
  order T, Z, Y, X (a nudge test below shows a wrong order still fails),
* every variable named by a ``bounds`` (CF-1.8 §7.1), ``ancillary_variables``
  (§3.4) or ``coordinates`` (§5) attribute exists (the compliance checker
  does not report a ``bounds`` attribute naming a missing variable).
"""

import re
import warnings
from pathlib import Path

import netCDF4

__all__ = ["DIM_ORDER", "HIGH", "MEDIUM", "allowed", "assert_cf_clean", "cf_findings",
           "cf_problems", "dangling_references"]

HIGH, MEDIUM = 3, 2  # compliance_checker.base.BaseCheck.HIGH / .MEDIUM

#: The one medium-priority message allowed (CF-1.8 §2.4, see the module docstring).
DIM_ORDER = re.compile(
    r"^(?P<var>\S+)'s spatio-temporal dimensions are not in the recommended order T, Z, Y, X "
    r"and/or further dimensions are not located left of T, Z, Y, X\. The dimensions \(and "
    r"their guessed types\) are (?P<dims>.*) \(with U: other/unknown; L: unlimited\)\.$"
)
_DIM_TYPE = re.compile(r"\S+ \((?P<axis>[TZYXU])(?:, unlimited)?\)")

_SUITE = None


def _suite():
    global _SUITE
    if _SUITE is None:
        from compliance_checker.runner import CheckSuite

        with warnings.catch_warnings():  # another of its checkers announces its deprecation
            warnings.simplefilter("ignore", DeprecationWarning)
            CheckSuite.load_all_available_checkers()
        _SUITE = CheckSuite()
    return _SUITE


def cf_findings(path: Path):
    """Run the compliance checker's cf:1.8 suite on `path`.

    Returns ``(failed, crashed)``: ``failed`` is a list of ``(priority, section,
    message)`` for every failed check, ``crashed`` maps the name of each check
    that raised to its exception.
    """
    suite = _suite()
    ds = suite.load_dataset(str(path))
    try:
        results = suite.run_all(ds, ["cf:1.8"], skip_checks=[])
    finally:
        ds.close()
    groups, crashed = results["cf:1.8"]
    assert groups, f"the cf:1.8 suite ran no check on {path.name}"
    failed = []
    for r in groups:
        passed, total = (r.value, True) if isinstance(r.value, bool) else r.value
        if passed < total:
            failed += [(r.weight, r.name, m) for m in (r.msgs or ["(no message)"])]
    return failed, {name: repr(exc) for name, (exc, _tb) in crashed.items()}


def allowed(priority, message) -> bool:
    """Only the §2.4 'other dimensions to the left' recommendation (see module docstring)."""
    if priority != MEDIUM:
        return False
    m = DIM_ORDER.match(message)
    if m is None:
        return False
    axes = "".join(t.group("axis") for t in _DIM_TYPE.finditer(m.group("dims")))
    spatiotemporal = axes.replace("U", "")
    return bool(re.fullmatch("T?Z?Y?X?", spatiotemporal))


def dangling_references(path: Path) -> list[str]:
    """Names in bounds / ancillary_variables / coordinates attributes that are not variables."""
    missing = []
    with netCDF4.Dataset(path) as nc:
        for name, var in nc.variables.items():
            for attr in ("bounds", "ancillary_variables", "coordinates"):
                for ref in str(getattr(var, attr, "")).split():
                    if ref not in nc.variables:
                        missing.append(f"{name}:{attr} names {ref!r}, which is not in the file")
    return missing


def cf_problems(path: Path) -> list[tuple]:
    """Everything that fails `path` here, as ``(priority, section, message)`` tuples."""
    failed, crashed = cf_findings(path)
    problems = [(HIGH, "check raised", f"{name}: {exc}") for name, exc in crashed.items()]
    problems += [f for f in failed if f[0] >= MEDIUM and not allowed(f[0], f[2])]
    problems += [(HIGH, "references", msg) for msg in dangling_references(path)]
    return problems


def assert_cf_clean(path: Path):
    """Zero CF-1.8 errors, no warning but the §2.4 one allowed, no dangling reference."""
    problems = cf_problems(path)
    assert problems == [], f"{path.name}:\n" + "\n".join(map(str, problems))
