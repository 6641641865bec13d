"""Rule sets of acceptance criteria: their types, the strict TOML reader and the formulas.

The shipped rule sets are the TOML files beside this module (``runup/rules/<name>.toml``);
a user may pass the path of a file of their own.  Each rule is a parametrised form -- never
an expression to evaluate -- carrying its published source, edition and a ``checked`` marker
(``"from memory"`` or ``"checked against <text>"``) that every verdict repeats:

``[margin]``
    Separation margin of a critical speed, separately below the minimum operating speed
    (MOS) and above the maximum continuous speed (MCS).  Form ``"af_dependent"``::

        SM = 0                                                           if AF < no_margin_below_af
        SM = min(cap, constant + coefficient * (1 - 1/(AF - af_offset)))   otherwise   [%]

    the API 617 / API RP 684 form (below MOS ``min(16, 17(1 - 1/(AF - 1.5)))``, above MCS
    ``min(26, 10 + 17(1 - 1/(AF - 1.5)))``, none for AF < 2.5; API 617 8th ed. 2014, API RP
    684 2nd ed. 2005 -- from memory); or form ``"flat"``, a fixed percent.
``[vibration_limit]``
    ``L = min(cap, coefficient * sqrt(reference_rpm / N))`` um pk-pk, ``N`` = MCS in rpm
    (API 617 8th ed. 2014 form with 25.4 um, 12 000 rpm, cap 25.4 um -- from memory).
``[zones]``
    Zone boundaries ``constant / sqrt(n)`` um pk-pk, ``n`` in r/min (ISO 20816-3:2022 /
    ISO 7919-3:2009 shaft-relative form, 4800 / 9000 / 13200 -- from memory); information
    only: zones judge steady running, not a run-up.

Judging lives in :mod:`runup.criteria`; the file format is described in ``docs/criteria.md``.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from importlib.resources import files
from pathlib import Path
from typing import Any, Literal

from ..errors import DataFormatError

__all__ = [
    "RULES_SCHEMA",
    "RuleSource",
    "RuleRef",
    "AfMarginForm",
    "FlatMarginForm",
    "MarginForm",
    "MarginRule",
    "VibrationLimit",
    "ZoneRule",
    "RuleSet",
    "Zone",
    "available_rule_sets",
    "load_rules",
    "margin_form_percent",
    "required_margin_percent",
    "vibration_limit_um_pp",
    "zone_boundaries_um_pp",
    "zone_of",
]

Zone = Literal["A", "B", "C", "D"]

#: Version of the rule-file format (top-level key ``schema``).
RULES_SCHEMA = 1


# ---------------------------------------------------------------------------------- rules
@dataclass(frozen=True)
class RuleSource:
    """Where a rule comes from: document, edition, optional clause, and how it was checked."""

    document: str
    edition: str
    checked: str
    clause: str | None = None

    @property
    def citation(self) -> str:
        """E.g. ``"API 617, 8th ed., 2014 (from memory)"``."""
        clause = f", {self.clause}" if self.clause else ""
        return f"{self.document}, {self.edition}{clause} ({self.checked})"


@dataclass(frozen=True)
class RuleRef:
    """A rule as every verdict names it: rule set it is defined in, title, source, note."""

    rule_set: str
    title: str
    source: RuleSource
    note: str = ""

    @property
    def label(self) -> str:
        return f"{self.rule_set}: {self.title} -- {self.source.citation}"


@dataclass(frozen=True)
class AfMarginForm:
    """``min(cap, constant + coefficient (1 - 1/(AF - af_offset)))`` %, 0 for AF < threshold."""

    no_margin_below_af: float
    constant_percent: float
    coefficient_percent: float
    af_offset: float
    cap_percent: float


@dataclass(frozen=True)
class FlatMarginForm:
    """A fixed margin, percent; none for AF < ``no_margin_below_af`` when that is given."""

    percent: float
    no_margin_below_af: float | None = None


MarginForm = AfMarginForm | FlatMarginForm


@dataclass(frozen=True)
class MarginRule:
    """Separation-margin rule: a form per side (``None`` where the rule set has none)."""

    ref: RuleRef
    below_min_operating: MarginForm | None
    above_max_continuous: MarginForm | None


@dataclass(frozen=True)
class VibrationLimit:
    """``min(cap_um_pp, coefficient_um_pp * sqrt(reference_rpm / N))`` um pk-pk, N = MCS."""

    ref: RuleRef
    coefficient_um_pp: float
    reference_rpm: float
    cap_um_pp: float


@dataclass(frozen=True)
class ZoneRule:
    """Zone boundaries ``constant / sqrt(n)`` um pk-pk (constants in um pp * sqrt(r/min))."""

    ref: RuleRef
    ab_um_pp_sqrt_rpm: float
    bc_um_pp_sqrt_rpm: float
    cd_um_pp_sqrt_rpm: float
    min_speed_rpm: float
    max_speed_rpm: float


@dataclass(frozen=True)
class RuleSet:
    """A loaded rule set; ``file`` is the TOML it was read from, ``includes`` the sets merged."""

    name: str
    title: str
    file: str
    applies_to: str
    note: str
    margin: MarginRule | None
    vibration_limit: VibrationLimit | None
    zones: ZoneRule | None
    includes: tuple[str, ...] = ()

    @property
    def rules(self) -> tuple[RuleRef, ...]:
        """Every rule of the set, with its source, in the order margin, limit, zones."""
        return tuple(
            r.ref for r in (self.margin, self.vibration_limit, self.zones) if r is not None
        )


# ------------------------------------------------------------------------- rule-file reader
class _Table:
    """A TOML table read strictly: typed getters, and unknown keys refused on ``close``."""

    def __init__(self, data: dict[str, Any], *, file: str, path: str) -> None:
        self.data, self.file, self.path, self.seen = data, file, path, set()

    def where(self, key: str) -> str:
        return f"{self.path}.{key}" if self.path else key

    def fail(self, key: str, message: str) -> DataFormatError:
        return DataFormatError(f"key '{self.where(key)}': {message}", file=self.file)

    def get(self, key: str, *, required: bool) -> Any:
        self.seen.add(key)
        if key not in self.data:
            if required:
                raise self.fail(key, "is missing; add it (docs/criteria.md lists every key)")
            return None
        return self.data[key]

    def number(self, key: str, *, required: bool = True, positive: bool = False) -> float | None:
        value = self.get(key, required=required)
        if value is None:
            return None
        if (
            isinstance(value, bool)
            or not isinstance(value, int | float)
            or not math.isfinite(value)
        ):
            raise self.fail(
                key, f"expected a finite number, found {value!r}; write e.g. {key} = 2.5"
            )
        if value < 0 or (positive and value == 0):
            raise self.fail(
                key,
                f"expected a {'positive' if positive else 'non-negative'} number, found {value!r}",
            )
        return float(value)

    def text(self, key: str, *, required: bool = True) -> str | None:
        value = self.get(key, required=required)
        if value is not None and (not isinstance(value, str) or not value.strip()):
            raise self.fail(key, f"expected a non-empty string, found {value!r}; quote it")
        return value

    def table(self, key: str) -> _Table | None:
        value = self.get(key, required=False)
        if value is not None and not isinstance(value, dict):
            raise self.fail(key, f"expected a table [{self.where(key)}], found {value!r}")
        return None if value is None else _Table(value, file=self.file, path=self.where(key))

    def close(self) -> None:
        unknown = sorted(set(self.data) - self.seen)
        if unknown:
            allowed = ", ".join(sorted(self.seen))
            raise self.fail(
                unknown[0],
                f"is not a known key here (allowed: {allowed}); check the spelling"
                + ("; a top-level key must come before the first [table]" if self.path else ""),
            )


def _choice(t: _Table, key: str, valid: tuple[str, ...]) -> str:
    value = t.text(key)
    if value not in valid:
        raise t.fail(key, f"expected one of {', '.join(repr(v) for v in valid)}, found {value!r}")
    return value


def _ref(t: _Table, *, rule_set: str, default_title: str) -> RuleRef:
    checked = t.text("checked")
    if not (checked.startswith("from memory") or checked.startswith("checked against ")):
        raise t.fail(
            "checked", f"expected 'from memory' or 'checked against <document>', found {checked!r}"
        )
    source = RuleSource(
        t.text("source"), t.text("edition"), checked, t.text("clause", required=False)
    )
    return RuleRef(
        rule_set,
        t.text("title", required=False) or default_title,
        source,
        t.text("note", required=False) or "",
    )


def _margin_form(t: _Table) -> MarginForm:
    form = _choice(t, "form", ("af_dependent", "flat"))
    if form == "flat":
        result: MarginForm = FlatMarginForm(
            t.number("percent"), t.number("no_margin_below_af", required=False, positive=True)
        )
    else:
        result = AfMarginForm(
            t.number("no_margin_below_af", positive=True),
            t.number("constant_percent"),
            t.number("coefficient_percent"),
            t.number("af_offset"),
            t.number("cap_percent"),
        )
        if not result.no_margin_below_af > result.af_offset:
            raise t.fail(
                "af_offset",
                f"must be below no_margin_below_af ({result.no_margin_below_af:g}) so that AF - af_offset > 0 wherever a margin is required",
            )
        if margin_form_percent(result, amplification_factor=result.no_margin_below_af) < 0:
            raise t.fail(
                "constant_percent",
                "the form gives a negative margin at AF = no_margin_below_af; raise constant_percent or no_margin_below_af",
            )
    t.close()
    return result


def _read_margin(t: _Table, name: str) -> MarginRule:
    ref = _ref(t, rule_set=name, default_title="separation margin")
    sides = [t.table(k) for k in ("below_min_operating", "above_max_continuous")]
    t.close()
    if all(s is None for s in sides):
        raise t.fail(
            "below_min_operating",
            "a [margin] needs [margin.below_min_operating] or [margin.above_max_continuous]",
        )
    below, above = (None if s is None else _margin_form(s) for s in sides)
    return MarginRule(ref, below, above)


def _read_limit(t: _Table, name: str) -> VibrationLimit:
    ref = _ref(t, rule_set=name, default_title="vibration limit at the maximum continuous speed")
    _choice(t, "form", ("speed_scaled",))
    rule = VibrationLimit(
        ref,
        t.number("coefficient_um_pp", positive=True),
        t.number("reference_rpm", positive=True),
        t.number("cap_um_pp", positive=True),
    )
    t.close()
    return rule


def _read_zones(t: _Table, name: str) -> ZoneRule:
    ref = _ref(t, rule_set=name, default_title="vibration zone at the maximum continuous speed")
    _choice(t, "form", ("inverse_sqrt_speed",))
    keys = (
        "ab_um_pp_sqrt_rpm",
        "bc_um_pp_sqrt_rpm",
        "cd_um_pp_sqrt_rpm",
        "min_speed_rpm",
        "max_speed_rpm",
    )
    rule = ZoneRule(ref, *(t.number(k, positive=True) for k in keys))
    t.close()
    if not rule.ab_um_pp_sqrt_rpm < rule.bc_um_pp_sqrt_rpm < rule.cd_um_pp_sqrt_rpm:
        raise t.fail("bc_um_pp_sqrt_rpm", "zone constants must rise: ab < bc < cd")
    if not rule.min_speed_rpm < rule.max_speed_rpm:
        raise t.fail("max_speed_rpm", "must exceed min_speed_rpm")
    return rule


def _rules_dir() -> Any:
    return files("runup") / "rules"  # works from a wheel, a zip or the source tree


def available_rule_sets() -> tuple[str, ...]:
    """Names of the shipped rule sets (file stems of ``runup/rules/*.toml``), sorted."""
    return tuple(sorted(p.name[:-5] for p in _rules_dir().iterdir() if p.name.endswith(".toml")))


def _read_file(name_or_path: str) -> tuple[str, dict[str, Any]]:
    path = Path(name_or_path)
    shipped = name_or_path in available_rule_sets()
    if not shipped and not path.is_file():
        raise DataFormatError(
            f"no rule set named {name_or_path!r} and no such file; use one of "
            f"{', '.join(available_rule_sets())} or the path of a rule file (docs/criteria.md)"
        )
    resource = _rules_dir() / f"{name_or_path}.toml" if shipped else path
    label = f"runup/rules/{name_or_path}.toml" if shipped else str(path)
    try:
        return label, tomllib.loads(resource.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise DataFormatError(
            f"not a valid TOML rule file ({exc}); fix the syntax", file=label
        ) from None
    except OSError as exc:
        raise DataFormatError(
            f"cannot read the rule file ({exc.strerror}); check its permissions", file=label
        ) from None


def load_rules(name_or_path: str) -> RuleSet:
    """Load a rule set by name (see :func:`available_rule_sets`) or from a TOML file path.

    Raises
    ------
    DataFormatError
        Unknown name or missing file, bad TOML, an unknown key, a value of the wrong type, a
        missing source/edition/checked marker, or an ``include`` cycle; the message names the
        file and the key.
    """
    return _load(name_or_path, chain=())


def _load(name_or_path: str, *, chain: tuple[str, ...]) -> RuleSet:
    label, data = _read_file(name_or_path)
    top = _Table(data, file=label, path="")
    if top.get("schema", required=True) != RULES_SCHEMA:
        raise top.fail("schema", f"expected {RULES_SCHEMA}, found {data['schema']!r}")
    name = top.text("name", required=False) or Path(label).stem
    title = top.text("title")
    applies_to, note = (
        top.text("applies_to", required=False) or "",
        top.text("note", required=False) or "",
    )
    include = top.get("include", required=False) or []
    if not (isinstance(include, list) and all(isinstance(i, str) for i in include)):
        raise top.fail("include", f"expected a list of shipped rule-set names, found {include!r}")
    tables = [top.table(k) for k in ("margin", "vibration_limit", "zones")]
    top.close()
    margin, limit, zones = (
        None if t is None else read(t, name)
        for t, read in zip(tables, (_read_margin, _read_limit, _read_zones), strict=True)
    )
    for inc in include:
        if inc not in available_rule_sets() or inc in chain + (name,):
            raise top.fail(
                "include",
                f"{inc!r} is not a shipped rule set or includes itself; use one of {', '.join(available_rule_sets())}",
            )
        other = _load(inc, chain=chain + (name,))
        for key, mine, theirs in (
            ("margin", margin, other.margin),
            ("vibration_limit", limit, other.vibration_limit),
            ("zones", zones, other.zones),
        ):
            if mine is not None and theirs is not None:
                raise top.fail(
                    "include", f"[{key}] is defined both here and in included {inc!r}; keep one"
                )
        margin, limit, zones = (
            margin or other.margin,
            limit or other.vibration_limit,
            zones or other.zones,
        )
    if margin is None and limit is None and zones is None:
        raise top.fail(
            "margin", "the rule set holds no rule; add [margin], [vibration_limit] or [zones]"
        )
    return RuleSet(name, title, label, applies_to, note, margin, limit, zones, tuple(include))


# ------------------------------------------------------------------------------- formulas
def margin_form_percent(form: MarginForm, *, amplification_factor: float) -> float:
    """Margin one side's form requires at an AF, percent; see the module notes for the forms.

    Returns ``nan`` for an AF-dependent form when the AF is ``nan`` (not determinable).
    """
    af = amplification_factor
    threshold = form.no_margin_below_af
    if threshold is not None and af < threshold:
        return 0.0
    if isinstance(form, FlatMarginForm):
        return form.percent
    if not math.isfinite(af):
        return math.nan
    value = form.constant_percent + form.coefficient_percent * (1.0 - 1.0 / (af - form.af_offset))
    return min(form.cap_percent, value)


def _side_form(rule: MarginRule, side: str) -> MarginForm | None:
    if side not in ("below", "above"):
        raise DataFormatError(f"side must be 'below' or 'above', got {side!r}")
    return rule.below_min_operating if side == "below" else rule.above_max_continuous


def required_margin_percent(
    rule: MarginRule, *, amplification_factor: float, side: Literal["below", "above"]
) -> float:
    """Separation margin a rule requires at an AF, percent of MOS (below) or MCS (above).

    Returns ``nan`` for an ``af_dependent`` form when the AF is ``nan`` (not determinable).

    Raises
    ------
    DataFormatError
        For an AF that is not positive, an unknown side, or a side the rule does not cover.
    """
    if not (amplification_factor > 0 or math.isnan(amplification_factor)):
        raise DataFormatError(
            f"amplification factor must be positive or nan, got {amplification_factor!r}"
        )
    form = _side_form(rule, side)
    if form is None:
        raise DataFormatError(
            f"rule '{rule.ref.label}' has no margin for criticals {side} the operating range"
        )
    return margin_form_percent(form, amplification_factor=amplification_factor)


def vibration_limit_um_pp(rule: VibrationLimit, *, speed_rpm: float) -> float:
    """``min(cap, coefficient * sqrt(reference_rpm / N))`` um pk-pk at ``N = speed_rpm``."""
    return min(rule.cap_um_pp, rule.coefficient_um_pp * math.sqrt(rule.reference_rpm / speed_rpm))


def zone_boundaries_um_pp(rule: ZoneRule, *, speed_rpm: float) -> tuple[float, float, float]:
    """A/B, B/C and C/D boundaries ``constant / sqrt(n)`` um pk-pk at ``n = speed_rpm``."""
    root = math.sqrt(speed_rpm)
    return (
        rule.ab_um_pp_sqrt_rpm / root,
        rule.bc_um_pp_sqrt_rpm / root,
        rule.cd_um_pp_sqrt_rpm / root,
    )


def zone_of(rule: ZoneRule, *, amplitude_um_pp: float, speed_rpm: float) -> Zone:
    """Zone of an amplitude; a value on a boundary belongs to the lower zone (runup's convention)."""
    ab, bc, cd = zone_boundaries_um_pp(rule, speed_rpm=speed_rpm)
    return (
        "A"
        if amplitude_um_pp <= ab
        else "B"
        if amplitude_um_pp <= bc
        else "C"
        if amplitude_um_pp <= cd
        else "D"
    )
