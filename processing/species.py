"""The isotopologue library: nuclides, molecules and isotopologues with sourced constants.

Data lives in ``processing/data/isotopologues.toml`` (shipped) and optionally in a user TOML
file of the same schema that adds molecules or overrides values. Main isotopologues carry
tabulated reference constants; minor ones are derived from a tabulated parent by Dunham mass
scaling, Y_kl' = Y_kl (mu/mu')^(k/2 + l), and record that derivation.
"""
from __future__ import annotations

import copy
import functools
import math
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from processing.errors import LibraryFileError, UnknownSpeciesError
from processing.physical_constants import bond_length_angstrom
from processing.levels import CONSTANT_TO_DUNHAM, dunham_from_constants

SHIPPED_LIBRARY_NAME = "isotopologues.toml"
MASS_SCALING_RULE = "Y_kl' = Y_kl (mu/mu')^(k/2+l); r_e unchanged"

# Reference-constant names accepted in a library file (cm-1 except r_e_angstrom).
DUNHAM_CONSTANT_NAMES: tuple[str, ...] = tuple(CONSTANT_TO_DUNHAM)
REFERENCE_NAMES: tuple[str, ...] = DUNHAM_CONSTANT_NAMES + ("r_e_angstrom",)
# Constants that are positive for every bound diatomic ground state.
_MUST_BE_POSITIVE = frozenset({"omega_e", "B_e", "D_e", "r_e_angstrom"})
_REQUIRED_CONSTANTS = ("omega_e", "B_e")
_MOLECULE_NUMBERS = (
    "band_strength_cm_per_molecule",
    "overtone_ratio",
    "broadening_hwhm_cm1_per_atm",
)


# ---------------------------------------------------------------------------- value objects
@dataclass(frozen=True)
class Nuclide:
    """One nuclide: isotopic mass (u) and natural abundance (fraction, 0..1)."""

    label: str
    element: str
    mass_number: int
    mass_u: float
    abundance: float
    source: str


@dataclass(frozen=True)
class ReferenceValue:
    """A constant with its source; ``recalled`` marks values not re-checked against print.

    `sigma` is the value's standard uncertainty (None: not stated). A value mass-scaled from
    another isotopologue's constant names it in `scaled_from` with the factor
    (mu/mu')^(k/2+l) and `scaling_sigma`, the uncertainty the scaling itself adds
    (Born-Oppenheimer breakdown for H/D swaps); `sigma` then includes the parent's."""

    value: float
    source: str
    recalled: bool
    sigma: float | None = None
    scaled_from: str | None = None
    scale_factor: float = 1.0
    scaling_sigma: float = 0.0


@dataclass(frozen=True)
class Isotopologue:
    """One isotopologue (e.g. H35Cl) with Dunham coefficients (cm-1) and sourced constants."""

    label: str
    molecule: str
    nuclides: tuple[str, str]
    masses_u: tuple[float, float]
    abundance: float
    dunham: dict[tuple[int, int], float] = field(repr=False)
    reference: dict[str, ReferenceValue] = field(repr=False)
    derived_from: str | None
    derivation: str
    band_strength_cm_per_molecule: float
    overtone_ratio: float
    broadening_hwhm_cm1_per_atm: float

    def __hash__(self) -> int:
        return hash((self.label, self.masses_u))

    @property
    def reduced_mass_u(self) -> float:
        """mu = m1 m2 / (m1 + m2), in u, from isotopic masses."""
        m1, m2 = self.masses_u
        return m1 * m2 / (m1 + m2)

    @property
    def mass_u(self) -> float:
        """Total mass m1 + m2, in u."""
        return self.masses_u[0] + self.masses_u[1]

    def constant(self, name: str) -> float | None:
        """A reference constant by name (``r_e`` is accepted for ``r_e_angstrom``); None if
        the library does not know it."""
        key = "r_e_angstrom" if name == "r_e" else name
        value = self.reference.get(key)
        return None if value is None else value.value


# ---------------------------------------------------------------------------- bond length
def equilibrium_bond_length_angstrom(B_e_cm1: float, reduced_mass_u: float) -> float:
    """r_e = sqrt(h / (8 pi^2 c mu B_e)) in angstrom, from CODATA constants."""
    if B_e_cm1 <= 0 or reduced_mass_u <= 0:
        raise ValueError("B_e and the reduced mass must be positive")
    return bond_length_angstrom(B_e_cm1, reduced_mass_u)


def equilibrium_bond_length_sigma_angstrom(
    B_e_cm1: float, sigma_B_cm1: float, reduced_mass_u: float, sigma_mu_u: float = 0.0
) -> float:
    """Standard uncertainty of r_e (angstrom): r ~ (mu B)^(-1/2), so
    sigma_r / r = (1/2) sqrt((sigma_B/B)^2 + (sigma_mu/mu)^2) (independent errors)."""
    r_e = equilibrium_bond_length_angstrom(B_e_cm1, reduced_mass_u)
    relative = 0.5 * math.hypot(sigma_B_cm1 / B_e_cm1, sigma_mu_u / reduced_mass_u)
    return r_e * relative


def reduced_mass_u(mass1_u: float, mass2_u: float) -> float:
    """m1 m2 / (m1 + m2), u."""
    return mass1_u * mass2_u / (mass1_u + mass2_u)


def canonical_label(nuclides: Iterable[Nuclide]) -> str:
    """Public label: hydrogen as H/D without mass number, other nuclides as <A><symbol>."""
    parts = []
    for nuclide in nuclides:
        if nuclide.element == "H" and nuclide.mass_number in (1, 2):
            parts.append("H" if nuclide.mass_number == 1 else "D")
        else:
            parts.append(f"{nuclide.mass_number}{nuclide.element}")
    return "".join(parts)


@dataclass(frozen=True)
class InterferentRegion:
    """A stretch of the spectrum where unassigned lines most likely belong to an atmospheric
    absorber left in the beam (a poor purge), not to the sample."""

    name: str
    first_cm1: float
    last_cm1: float
    absorber: str  # how the check names it: "CO2", "water-vapour"
    description: str  # the likely cause given to such a line

    def holds(self, wavenumber_cm1: float) -> bool:
        return self.first_cm1 <= wavenumber_cm1 <= self.last_cm1


# ---------------------------------------------------------------------------- library
@dataclass(frozen=True)
class Library:
    """All known isotopologues, looked up by label or molecule name."""

    nuclides: dict[str, Nuclide] = field(repr=False)
    entries: dict[str, Isotopologue] = field(repr=False)
    sources: tuple[str, ...] = field(default=())
    interferent_regions: tuple[InterferentRegion, ...] = field(default=(), repr=False)

    def interferent_region(self, wavenumber_cm1: float) -> InterferentRegion | None:
        """The first interferent region holding a wavenumber, or None."""
        return next((region for region in self.interferent_regions if region.holds(wavenumber_cm1)), None)

    def __hash__(self) -> int:
        return hash(tuple(self.entries))

    def isotopologue(self, label: str) -> Isotopologue:
        """One isotopologue by its exact label (e.g. ``H35Cl``), or by a unique
        case-insensitive match."""
        if label in self.entries:
            return self.entries[label]
        matches = [key for key in self.entries if key.casefold() == label.casefold()]
        if len(matches) == 1:
            return self.entries[matches[0]]
        raise UnknownSpeciesError(f"unknown isotopologue {label!r}; known: {', '.join(self.entries)}")

    def isotopologues(self) -> tuple[Isotopologue, ...]:
        """Every isotopologue, in file order."""
        return tuple(self.entries.values())

    def molecules(self) -> tuple[str, ...]:
        """Molecule names (HCl, DCl, CO, ...), in file order."""
        return tuple(dict.fromkeys(entry.molecule for entry in self.entries.values()))

    def molecule(self, name: str) -> tuple[Isotopologue, ...]:
        """Isotopologues of one molecule, most abundant first."""
        names = self.molecules()
        if name not in names:
            matches = [known for known in names if known.casefold() == name.casefold()]
            if len(matches) != 1:
                raise UnknownSpeciesError(f"unknown molecule {name!r}; known: {', '.join(names)}")
            name = matches[0]
        members = [entry for entry in self.entries.values() if entry.molecule == name]
        return tuple(sorted(members, key=lambda entry: -entry.abundance))

    # ------------------------------------------------------------ molecule questions
    def family(self, name: str) -> str:
        """The molecule family of a molecule or isotopologue: its elements, e.g. "H-Cl" for
        HCl, DCl and all their isotopologues (isotopes do not change the family)."""
        entry = self.entries.get(name) or self.molecule(name)[0]
        return "-".join(self.nuclides[label].element for label in entry.nuclides)

    def partner(self, molecule: str) -> str | None:
        """The other molecule of the same family, for a family of exactly two (the H and D
        forms: HCl <-> DCl); None when the molecule has no such partner (CO)."""
        family = self.family(molecule)
        name = self.molecule(molecule)[0].molecule
        others = [other for other in self.molecules() if other != name and self.family(other) == family]
        return others[0] if len(others) == 1 else None

    def light_and_heavy(self, molecule: str) -> tuple[str, str] | None:
        """(lighter form, heavier form) of a molecule and its partner, by the mass of the
        nuclide in which they differ (HCl, DCl); None without a partner."""
        partner = self.partner(molecule)
        if partner is None:
            return None
        name = self.molecule(molecule)[0].molecule
        return (name, partner) if self._differing_mass(name, partner) < self._differing_mass(partner, name) else (partner, name)

    def _differing_mass(self, molecule: str, other: str) -> float:
        """Mass of the nuclide of `molecule`'s main isotopologue that `other`'s lacks."""
        mine = self.molecule(molecule)[0].nuclides
        theirs = set(self.molecule(other)[0].nuclides)
        return sum(self.nuclides[label].mass_u for label in mine if label not in theirs)

    def partner_isotopologue(self, label: str) -> str | None:
        """The isotopologue of the partner molecule that shares every other nuclide with
        `label` (H35Cl -> D35Cl, D37Cl -> H37Cl): the pair whose columns compare like with
        like. None without a partner or without such an isotopologue."""
        entry = self.isotopologue(label)
        partner = self.partner(entry.molecule)
        if partner is None:
            return None
        kept = {n for n in entry.nuclides if any(n in other.nuclides for other in self.molecule(partner))}
        for other in self.molecule(partner):
            if kept and set(other.nuclides) & set(entry.nuclides) == kept:
                return other.label
        return None

    def resolve(self, names: Iterable[str]) -> tuple[Isotopologue, ...]:
        """Molecule names (all their isotopologues) or isotopologue labels -> isotopologues,
        without duplicates, in the order asked. Exact matches win over case-insensitive ones."""
        if isinstance(names, str):
            names = [names]
        found: dict[str, Isotopologue] = {}
        molecule_names = self.molecules()
        for raw in names:
            name = raw.strip()
            if name in self.entries:
                chosen: tuple[Isotopologue, ...] = (self.entries[name],)
            elif name in molecule_names:
                chosen = self.molecule(name)
            else:
                folded = name.casefold()
                labels = [key for key in self.entries if key.casefold() == folded]
                molecules = [key for key in molecule_names if key.casefold() == folded]
                if len(labels) + len(molecules) > 1:
                    raise UnknownSpeciesError(
                        f"species name {raw!r} is ambiguous: {', '.join(labels + molecules)}"
                    )
                if labels:
                    chosen = (self.entries[labels[0]],)
                elif molecules:
                    chosen = self.molecule(molecules[0])
                else:
                    raise UnknownSpeciesError(
                        f"unknown species {raw!r}; molecules: {', '.join(molecule_names)}"
                    )
            for entry in chosen:
                found.setdefault(entry.label, entry)
        return tuple(found.values())


def shipped_library_path() -> Path:
    """Path of the library file shipped inside the package (beside this module: bandwatch is
    installed as files, never run from a zip, and importlib.resources would cost `bandwatch
    process` 6 ms of imports)."""
    return Path(__file__).resolve().parent / "data" / SHIPPED_LIBRARY_NAME


def load_library(user_file: str | Path | None = None) -> Library:
    """The shipped library, optionally extended/overridden by a user TOML file.

    Raises LibraryFileError naming the file and the key for any malformed input."""
    if user_file is None:
        return _shipped_library()
    base_path = shipped_library_path()
    base = _read_toml(base_path)
    user_path = Path(user_file)
    user = _read_toml(user_path)
    _check_top_level(user, user_path)
    merged, origin = _merge(base, user, base_path, user_path)
    return _build(merged, origin, (str(base_path), str(user_path)))


@functools.lru_cache(maxsize=1)
def _shipped_library() -> Library:
    path = shipped_library_path()
    raw = _read_toml(path)
    _check_top_level(raw, path)
    origin = {
        (section, name): path
        for section in _NAMED_SECTIONS
        for name in raw.get(section, {})
    }
    return _build(raw, origin, (str(path),))


# ---------------------------------------------------------------------------- parsing
_SECTIONS = ("meta", "nuclides", "molecules", "isotopologues", "interferent_regions")
_NAMED_SECTIONS = ("nuclides", "molecules", "isotopologues", "interferent_regions")


def _read_toml(path: Path) -> dict[str, Any]:
    try:
        with open(path, "rb") as handle:
            return tomllib.load(handle)
    except FileNotFoundError:
        raise LibraryFileError(path, "file not found") from None
    except OSError as error:
        raise LibraryFileError(path, f"cannot read: {error.strerror or error}") from None
    except tomllib.TOMLDecodeError as error:
        raise LibraryFileError(path, f"not valid TOML: {error}") from None


def _check_top_level(raw: Mapping[str, Any], path: Path) -> None:
    for key, value in raw.items():
        if key not in _SECTIONS:
            raise LibraryFileError(path, f"{key}: unknown section (expected one of {', '.join(_SECTIONS)})")
        if not isinstance(value, dict):
            raise LibraryFileError(path, f"{key}: must be a table")
        if key == "meta":
            continue
        for name, entry in value.items():
            if not isinstance(entry, dict):
                raise LibraryFileError(path, f"{key}.{name}: must be a table")


def _merge(
    base: dict[str, Any], user: dict[str, Any], base_path: Path, user_path: Path
) -> tuple[dict[str, Any], dict[tuple[str, str], Path]]:
    """User entries override shipped ones key by key (constants value by value)."""
    merged = copy.deepcopy(base)
    origin = {
        (section, name): base_path
        for section in _NAMED_SECTIONS
        for name in base.get(section, {})
    }
    for section in _NAMED_SECTIONS:
        for name, entry in user.get(section, {}).items():
            target = merged.setdefault(section, {}).setdefault(name, {})
            for key, value in entry.items():
                if key == "constants" and isinstance(value, dict) and isinstance(target.get(key), dict):
                    target[key].update(value)
                else:
                    target[key] = copy.deepcopy(value)
            if section == "isotopologues" and "derived_from" in entry:
                target.pop("constants", None)
            if section == "isotopologues" and "constants" in entry:
                target.pop("derived_from", None)
            origin[(section, name)] = user_path
    return merged, origin


def _number(path: Path, where: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise LibraryFileError(path, f"{where}: must be a number, got {type(value).__name__} {value!r}")
    number = float(value)
    if not math.isfinite(number):
        raise LibraryFileError(path, f"{where}: must be finite, got {value!r}")
    return number


def _text(path: Path, where: str, value: Any) -> str:
    if not isinstance(value, str) or not value.strip():
        raise LibraryFileError(path, f"{where}: must be a non-empty string")
    return value


def _require(path: Path, where: str, entry: Mapping[str, Any], key: str) -> Any:
    if key not in entry:
        raise LibraryFileError(path, f"{where}.{key}: missing")
    return entry[key]


def _parse_nuclide(path: Path, name: str, entry: Mapping[str, Any]) -> Nuclide:
    where = f"nuclides.{name}"
    allowed = {"element", "mass_number", "mass_u", "abundance", "source"}
    _reject_unknown_keys(path, where, entry, allowed)
    element = _text(path, f"{where}.element", _require(path, where, entry, "element"))
    mass_number = _require(path, where, entry, "mass_number")
    if isinstance(mass_number, bool) or not isinstance(mass_number, int) or mass_number < 1:
        raise LibraryFileError(path, f"{where}.mass_number: must be a positive integer")
    mass = _number(path, f"{where}.mass_u", _require(path, where, entry, "mass_u"))
    if mass <= 0:
        raise LibraryFileError(path, f"{where}.mass_u: must be positive, got {mass!r}")
    # |mass excess| < 0.1 u for every nuclide (AME2020); a standard atomic weight such as
    # 35.453 for Cl is farther from any mass number and is rejected here.
    if abs(mass - mass_number) > 0.15:
        raise LibraryFileError(
            path, f"{where}.mass_u: {mass!r} u is not an isotopic mass for A = {mass_number}"
        )
    abundance = _number(path, f"{where}.abundance", _require(path, where, entry, "abundance"))
    if not 0.0 <= abundance <= 1.0:
        raise LibraryFileError(path, f"{where}.abundance: must be a fraction in 0..1, got {abundance!r}")
    source = _text(path, f"{where}.source", _require(path, where, entry, "source"))
    return Nuclide(name, element, mass_number, mass, abundance, source)


def _reject_unknown_keys(path: Path, where: str, entry: Mapping[str, Any], allowed: set[str]) -> None:
    for key in entry:
        if key not in allowed:
            raise LibraryFileError(path, f"{where}.{key}: unknown key (allowed: {', '.join(sorted(allowed))})")


def _parse_molecule(path: Path, name: str, entry: Mapping[str, Any]) -> dict[str, float]:
    where = f"molecules.{name}"
    allowed = set(_MOLECULE_NUMBERS) | {
        "band_strength_source", "overtone_ratio_source", "broadening_source",
    }
    _reject_unknown_keys(path, where, entry, allowed)
    values: dict[str, float] = {}
    for key in _MOLECULE_NUMBERS:
        number = _number(path, f"{where}.{key}", _require(path, where, entry, key))
        if number < 0:
            raise LibraryFileError(path, f"{where}.{key}: must not be negative, got {number!r}")
        values[key] = number
    for key in ("band_strength_source", "overtone_ratio_source", "broadening_source"):
        if key in entry:
            _text(path, f"{where}.{key}", entry[key])
    return values


def _parse_constants(path: Path, where: str, table: Any) -> dict[str, ReferenceValue]:
    """Constants as written; a `scaled_from` entry gets its value later (`_resolve_scaled`)."""
    if not isinstance(table, dict):
        raise LibraryFileError(path, f"{where}: must be a table of constants")
    reference: dict[str, ReferenceValue] = {}
    for name, item in table.items():
        key = f"{where}.{name}"
        if name not in REFERENCE_NAMES:
            raise LibraryFileError(path, f"{key}: unknown constant (known: {', '.join(REFERENCE_NAMES)})")
        if not isinstance(item, dict):
            raise LibraryFileError(path, f"{key}: must be a table {{value, sigma, source, recalled}}")
        _reject_unknown_keys(path, key, item, {"value", "sigma", "source", "recalled", "scaled_from"})
        source = _text(path, f"{key}.source", _require(path, key, item, "source"))
        recalled = item.get("recalled", False)
        if not isinstance(recalled, bool):
            raise LibraryFileError(path, f"{key}.recalled: must be true or false")
        sigma = None
        if "sigma" in item:
            sigma = _number(path, f"{key}.sigma", item["sigma"])
            if sigma < 0:
                raise LibraryFileError(path, f"{key}.sigma: must not be negative, got {sigma!r}")
        if "scaled_from" in item:
            if "value" in item:
                raise LibraryFileError(path, f"{key}: give either value or scaled_from, not both")
            parent = _text(path, f"{key}.scaled_from", item["scaled_from"])
            reference[name] = ReferenceValue(math.nan, source, recalled, None, parent, 1.0, sigma or 0.0)
            continue
        value = _number(path, f"{key}.value", _require(path, key, item, "value"))
        if name in _MUST_BE_POSITIVE and value <= 0:
            raise LibraryFileError(path, f"{key}.value: must be positive, got {value!r}")
        reference[name] = ReferenceValue(value, source, recalled, sigma)
    for name in _REQUIRED_CONSTANTS:
        if name not in reference:
            raise LibraryFileError(path, f"{where}.{name}: missing")
    return reference


def _parse_scaling_sigma(path: Path, where: str, table: Any) -> dict[str, float]:
    """`mass_scaling_sigma`: per constant, the uncertainty mass scaling adds (cm-1)."""
    if not isinstance(table, dict):
        raise LibraryFileError(path, f"{where}: must be a table of constant = sigma")
    out: dict[str, float] = {}
    for name, value in table.items():
        if name not in DUNHAM_CONSTANT_NAMES:
            raise LibraryFileError(path, f"{where}.{name}: unknown constant (known: {', '.join(DUNHAM_CONSTANT_NAMES)})")
        number = _number(path, f"{where}.{name}", value)
        if number < 0:
            raise LibraryFileError(path, f"{where}.{name}: must not be negative, got {number!r}")
        out[name] = number
    return out


def _build(
    raw: Mapping[str, Any], origin: Mapping[tuple[str, str], Path], sources: tuple[str, ...]
) -> Library:
    nuclides = {
        name: _parse_nuclide(origin[("nuclides", name)], name, entry)
        for name, entry in raw.get("nuclides", {}).items()
    }
    molecules = {
        name: _parse_molecule(origin[("molecules", name)], name, entry)
        for name, entry in raw.get("molecules", {}).items()
    }
    isotopologue_tables: dict[str, Mapping[str, Any]] = raw.get("isotopologues", {})
    allowed = {"molecule", "nuclides", "constants", "derived_from", "mass_scaling_sigma"} | set(_MOLECULE_NUMBERS)

    prepared: dict[str, dict[str, Any]] = {}
    for label, entry in isotopologue_tables.items():
        path = origin[("isotopologues", label)]
        where = f"isotopologues.{label}"
        _reject_unknown_keys(path, where, entry, allowed)
        molecule = _text(path, f"{where}.molecule", _require(path, where, entry, "molecule"))
        if molecule not in molecules:
            raise LibraryFileError(path, f"{where}.molecule: no [molecules.{molecule}] table")
        pair = _require(path, where, entry, "nuclides")
        if not isinstance(pair, list) or len(pair) != 2 or not all(isinstance(n, str) for n in pair):
            raise LibraryFileError(path, f"{where}.nuclides: must be a list of two nuclide labels")
        for nuclide_label in pair:
            if nuclide_label not in nuclides:
                raise LibraryFileError(path, f"{where}.nuclides: unknown nuclide {nuclide_label!r}")
        members = (nuclides[pair[0]], nuclides[pair[1]])
        expected = canonical_label(members)
        if label != expected:
            raise LibraryFileError(path, f"{where}: label must be {expected!r} for nuclides {pair}")
        has_constants = "constants" in entry
        has_parent = "derived_from" in entry
        if has_constants == has_parent:
            raise LibraryFileError(path, f"{where}: give either a constants table or derived_from")
        per_molecule = dict(molecules[molecule])
        for key in _MOLECULE_NUMBERS:
            if key in entry:
                number = _number(path, f"{where}.{key}", entry[key])
                if number < 0:
                    raise LibraryFileError(path, f"{where}.{key}: must not be negative")
                per_molecule[key] = number
        abundance = members[0].abundance * members[1].abundance
        if members[0].element == members[1].element and members[0].label != members[1].label:
            abundance *= 2.0  # two distinguishable arrangements, e.g. 35Cl37Cl
        prepared[label] = {
            "path": path,
            "molecule": molecule,
            "nuclides": (members[0].label, members[1].label),
            "masses_u": (members[0].mass_u, members[1].mass_u),
            "abundance": abundance,
            "per_molecule": per_molecule,
            "constants": (
                _parse_constants(path, f"{where}.constants", entry["constants"]) if has_constants else None
            ),
            "derived_from": (
                _text(path, f"{where}.derived_from", entry["derived_from"]) if has_parent else None
            ),
            "scaling_sigma": (
                _parse_scaling_sigma(path, f"{where}.mass_scaling_sigma", entry["mass_scaling_sigma"])
                if "mass_scaling_sigma" in entry else {}
            ),
        }

    entries: dict[str, Isotopologue] = {}
    for label, item in prepared.items():
        reference, dunham, derivation = _constants_for(label, item, prepared)
        entries[label] = Isotopologue(
            label=label,
            molecule=item["molecule"],
            nuclides=item["nuclides"],
            masses_u=item["masses_u"],
            abundance=item["abundance"],
            dunham=dunham,
            reference=reference,
            derived_from=item["derived_from"],
            derivation=derivation,
            band_strength_cm_per_molecule=item["per_molecule"]["band_strength_cm_per_molecule"],
            overtone_ratio=item["per_molecule"]["overtone_ratio"],
            broadening_hwhm_cm1_per_atm=item["per_molecule"]["broadening_hwhm_cm1_per_atm"],
        )
    regions = tuple(
        _parse_interferent_region(origin[("interferent_regions", name)], name, entry)
        for name, entry in raw.get("interferent_regions", {}).items()
    )
    return Library(nuclides=nuclides, entries=entries, sources=sources, interferent_regions=regions)


def _parse_interferent_region(path: Path, name: str, entry: Mapping[str, Any]) -> InterferentRegion:
    where = f"interferent_regions.{name}"
    _reject_unknown_keys(path, where, entry, {"first_cm1", "last_cm1", "absorber", "description"})
    first = _number(path, f"{where}.first_cm1", _require(path, where, entry, "first_cm1"))
    last = _number(path, f"{where}.last_cm1", _require(path, where, entry, "last_cm1"))
    if not 0 < first < last:
        raise LibraryFileError(path, f"{where}: need 0 < first_cm1 < last_cm1, got {first!r} and {last!r}")
    absorber = _text(path, f"{where}.absorber", _require(path, where, entry, "absorber"))
    description = _text(path, f"{where}.description", _require(path, where, entry, "description"))
    return InterferentRegion(name, first, last, absorber, description)


def _scale_exponent(name: str) -> float:
    """k/2 + l of a constant's Dunham term; 0 for r_e (mass-independent)."""
    if name == "r_e_angstrom":
        return 0.0
    k, l, _sign = CONSTANT_TO_DUNHAM[name]
    return k / 2.0 + l


def _scaled(
    name: str, parent_label: str, target: Mapping[str, Any], prepared: Mapping[str, Mapping[str, Any]],
    extra_sigma: float, source: str, where: str, stack: tuple[str, ...],
) -> ReferenceValue | None:
    """`name` of `parent_label` mass-scaled to the target's reduced mass (None: parent lacks it)."""
    path = target["path"]
    parent = prepared.get(parent_label)
    if parent is None:
        raise LibraryFileError(path, f"{where}: unknown isotopologue {parent_label!r}")
    if parent["constants"] is None:
        raise LibraryFileError(path, f"{where}: {parent_label!r} is itself derived; name a tabulated one")
    if parent_label in stack:
        raise LibraryFileError(path, f"{where}: mass scaling goes round in a circle ({' -> '.join(stack + (parent_label,))})")
    if name not in parent["constants"]:
        return None
    base = _resolved(parent_label, name, prepared, stack + (parent_label,))
    ratio = reduced_mass_u(*parent["masses_u"]) / reduced_mass_u(*target["masses_u"])
    factor = ratio ** _scale_exponent(name)
    sigma = None
    if base.sigma is not None:
        sigma = math.hypot(base.sigma * factor, extra_sigma)
    elif extra_sigma:
        sigma = extra_sigma
    return ReferenceValue(base.value * factor, source, base.recalled, sigma, parent_label, factor, extra_sigma)


def _resolved(label: str, name: str, prepared: Mapping[str, Mapping[str, Any]], stack: tuple[str, ...]) -> ReferenceValue:
    """A tabulated entry's constant with any `scaled_from` value computed."""
    item = prepared[label]
    ref: ReferenceValue = item["constants"][name]
    if ref.scaled_from is None:
        return ref
    where = f"isotopologues.{label}.constants.{name}.scaled_from"
    scaled = _scaled(name, ref.scaled_from, item, prepared, ref.scaling_sigma, ref.source, where, stack)
    if scaled is None:
        raise LibraryFileError(item["path"], f"{where}: {ref.scaled_from!r} has no {name}")
    return scaled


def _constants_for(
    label: str, item: Mapping[str, Any], prepared: Mapping[str, Mapping[str, Any]]
) -> tuple[dict[str, ReferenceValue], dict[tuple[int, int], float], str]:
    """Reference constants, Dunham coefficients and a derivation note for one entry."""
    if item["constants"] is not None:
        reference = {name: _resolved(label, name, prepared, (label,)) for name in item["constants"]}
        dunham = dunham_from_constants({name: ref.value for name, ref in reference.items()})
        scaled = sorted(name for name, ref in reference.items() if ref.scaled_from)
        derivation = "tabulated" + (f"; mass-scaled: {', '.join(scaled)}" if scaled else "")
        return reference, dunham, derivation
    parent_label = item["derived_from"]
    where = f"isotopologues.{label}.derived_from"
    parent = prepared.get(parent_label)
    if parent is None:
        raise LibraryFileError(item["path"], f"{where}: unknown isotopologue {parent_label!r}")
    source = f"mass-scaled from {parent_label} ({MASS_SCALING_RULE})"
    reference: dict[str, ReferenceValue] = {}
    for name in (parent["constants"] or {}):
        extra = item["scaling_sigma"].get(name, 0.0)
        scaled = _scaled(name, parent_label, item, prepared, extra, source, where, (label,))
        if scaled is not None:
            reference[name] = scaled
    dunham = dunham_from_constants({name: ref.value for name, ref in reference.items()})
    mu_parent = reduced_mass_u(*parent["masses_u"])
    mu_target = reduced_mass_u(*item["masses_u"])
    derivation = (
        f"Dunham mass scaling from {parent_label}: {MASS_SCALING_RULE}, "
        f"mu({parent_label}) = {mu_parent:.9f} u, mu({label}) = {mu_target:.9f} u"
    )
    return reference, dunham, derivation
