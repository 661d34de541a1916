"""Congruences on integer columns: ``sum(coef * column) ≡ residue (mod modulus)``.

The numeric core of congruence finding for the relations step. Single columns
(``x ≡ r (mod m)``) and pairs with small coefficients (``a*x + b*y ≡ r (mod m)``) are tested
for every modulus asked for, on every row where the columns are present, and kept when they
hold on every row or on all but a few (the breaking rows are listed).

Rules (each one lives here, and the tests check each):

- Only the strongest modulus is reported: a fact mod ``M`` that has as few breakers as the
  same fact mod a divisor ``m`` of ``M`` makes the latter redundant; it is left out and named
  once in ``implied_moduli`` of the stronger fact.
- A column with fewer than ``min_distinct`` (default 3) distinct values on the rows that obey
  a congruence is left out of single-column facts: one value is a constant column, and two
  values always share a residue class modulo any divisor of their difference, so such a fact
  says nothing. The same rule applies to the value of ``a*x + b*y`` for pairs (a pair whose
  combination is constant is an exact relation, not a congruence). Constant columns take no
  part in pairs.
- Pairs are normalised so that one fact is reported once: coefficients nonzero modulo ``m``
  with ``gcd(a, b, m) = 1`` (otherwise the fact is one mod ``m / gcd``), scaled by the unit
  of ``Z/m`` that gives the smallest pair of residues (so the first coefficient is 1 whenever
  a unit allows), and written with signed representatives in ``(-m/2, m/2]``.
- A pair is left out when a reported single-column congruence (or a constant column)
  determines one of its terms modulo ``m``: then the pair says no more than a fact about one
  column.
- A congruence that follows from one of the given exact relations ``sum(c_i x_i) = k`` (some
  integer ``t`` with ``coef_i ≡ t*c_i`` and ``residue ≡ t*k`` modulo ``m``) is left out, not
  just marked. Combinations of several relations are not searched.
- A near-congruence may have at most ``max_breakers`` breaking rows and never more than
  ``max_breaker_share`` of the rows checked (so tiny tables allow no breakers at all).
- Ranking by simplicity: fewer terms, smaller coefficients, larger modulus, fewer breakers.

All arithmetic is exact: columns are reduced modulo each needed modulus once (Python integers
of any size reduce exactly), and every test is a histogram of small residues.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from fractions import Fraction
from itertools import combinations

import numpy as np

from analysis.errors import StepError
from analysis.plain import row_id

MAX_MODULUS = 64
"""The largest modulus searched; a pair test costs a histogram of modulus squared bins."""
MODULI = tuple(range(2, 13))
"""The moduli searched unless others are asked for."""
MAX_LISTED_ROWS = 1000
"""Breaking rows listed per congruence unless another number is asked for."""
# Columns spanning at most this many values are counted on a grid of their values.
_GRID_SPAN = 1 << 16


@dataclass(frozen=True)
class Congruence:
    """A congruence ``sum(coef * column) ≡ residue (mod modulus)`` found on the table.

    ``terms``: (column, coef) pairs with integer coefficients; ``residue`` lies in
    ``0 <= residue < modulus``; ``holds_on`` counts the rows checked (those where every term's
    column is present); ``violations``: ids of the breaking rows (at most ``max_listed_rows``
    of them), ``violation_count`` their full number; ``implied_moduli``: the weaker moduli
    whose same fact this one makes redundant (e.g. ``(2,)`` for a fact mod 4).
    """

    terms: tuple[tuple[str, int], ...]
    modulus: int
    residue: int
    holds_on: int
    violations: tuple = ()
    violation_count: int = 0
    implied_moduli: tuple[int, ...] = ()

    @property
    def text(self) -> str:
        """The congruence as one line, e.g. ``twice_area + boundary ≡ 0 (mod 2)``."""
        parts = []
        for index, (name, coef) in enumerate(self.terms):
            size = abs(coef)
            body = name if size == 1 else f"{size}*{name}"
            if index == 0:
                parts.append(body if coef > 0 else f"-{body}")
            else:
                parts.append(("+ " if coef > 0 else "- ") + body)
        return f"{' '.join(parts)} ≡ {self.residue} (mod {self.modulus})"

    def to_json(self) -> dict:
        """The congruence in the JSON shape of the design's ``congruences`` list."""
        return {
            "terms": [{"column": name, "coef": str(coef)} for name, coef in self.terms],
            "modulus": self.modulus,
            "residue": self.residue,
            "text": self.text,
            "holds_on": self.holds_on,
            "violations": [row_id(v) for v in self.violations],
            "violation_count": self.violation_count,
            "implied_moduli": list(self.implied_moduli),
        }


@dataclass(frozen=True)
class _Column:
    name: str
    present: np.ndarray  # bool mask over rows
    exact: np.ndarray  # exact values on present rows: int64 or object (Python ints)
    residues: dict  # base modulus -> int64 residues on present rows
    low: int = 0  # least value, and how many values from it a grid of its values spans
    span: int = 0  # (0 for a column too wide for a grid or held as Python ints)


def _is_missing(value) -> bool:
    if value is None or type(value).__name__ == "NAType":
        return True
    return isinstance(value, (float, np.floating)) and math.isnan(value)


def _as_integer(value, name: str, row: int) -> int:
    if isinstance(value, (bool, np.bool_)):
        raise StepError(f"column {name!r}, row {row + 1}: expected an integer, got a boolean "
                        f"{value!r}. Congruences are looked for on integer columns only.")
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, Fraction) and value.denominator == 1:
        return int(value)
    if isinstance(value, (float, np.floating)) and float(value).is_integer() \
            and abs(value) < 2 ** 53:
        return int(value)
    raise StepError(f"column {name!r}, row {row + 1}: expected an integer, got {value!r}. "
                    "Congruences are looked for on integer columns only; leave this column out.")


def _exact_values(name: str, values, n_rows: int) -> tuple[np.ndarray, np.ndarray]:
    """The present mask and the exact present values of one column."""
    if len(values) != n_rows:
        raise StepError(f"column {name!r}: {len(values)} values for {n_rows} row ids; "
                        "give one value per row.")
    array = values if isinstance(values, np.ndarray) else None
    if array is not None and array.dtype.kind in "iu":
        # int64 arithmetic on a*x + b*y stays exact below 2**62; larger values go exact.
        small = n_rows == 0 or (int(array.max()) < 2 ** 62 and int(array.min()) > -(2 ** 62))
        exact = array.astype(np.int64) if small else np.array(array.tolist(), dtype=object)
        return np.ones(n_rows, dtype=bool), exact
    present = np.ones(n_rows, dtype=bool)
    exact = []
    for row, value in enumerate(values):
        if _is_missing(value):
            present[row] = False
        else:
            exact.append(_as_integer(value, name, row))
    small = all(-(2 ** 62) < v < 2 ** 62 for v in exact)
    return present, np.array(exact, dtype=np.int64 if small else object)


def _reduce(exact: np.ndarray, modulus: int) -> np.ndarray:
    if exact.dtype == object:
        return np.array([v % modulus for v in exact.tolist()], dtype=np.int64)
    return exact % modulus


def _base_moduli(moduli: Sequence[int]) -> list[int]:
    """The moduli that divide no other modulus asked for: every test folds from these."""
    return [m for m in moduli if not any(other != m and other % m == 0 for other in moduli)]


def _owned_moduli(moduli: Sequence[int]) -> dict[int, list[int]]:
    """Each modulus tested once: from the first base modulus that it divides."""
    bases = _base_moduli(moduli)
    owned = {base: [] for base in bases}
    for m in moduli:
        owned[next(base for base in bases if base % m == 0)].append(m)
    return owned


def _prepare(columns: Mapping[str, Sequence], n_rows: int, moduli: list[int]) -> list[_Column]:
    bases = _base_moduli(moduli)
    common = math.lcm(*bases)
    prepared = []
    for name, values in columns.items():
        present, exact = _exact_values(str(name), values, n_rows)
        if exact.dtype == object and common < 2 ** 31:
            # One exact reduction of the big integers, then cheap int64 work per modulus.
            reduced = _reduce(exact, common)
            residues = {m: reduced % m for m in bases}
        else:
            residues = {m: _reduce(exact, m) for m in bases}
        low = span = 0
        if exact.dtype != object and len(exact):
            low = int(exact.min())
            span = int(exact.max()) - low + 1
            span = span if span <= _GRID_SPAN else 0
        prepared.append(_Column(str(name), present, exact, residues, low, span))
    return prepared


def _distinct_at_least(values: np.ndarray, count: int) -> bool:
    if len(values) == 0:
        return False
    # Most columns show enough distinct values in their first rows: look there first.
    for part in (values[:1000], values):
        found = len(set(part.tolist())) if values.dtype == object else len(np.unique(part))
        if found >= count:
            return True
    return False


def _fold(histogram: np.ndarray, base: int, modulus: int) -> np.ndarray:
    """A histogram of residues mod ``base`` (1-d or 2-d) folded to residues mod ``modulus``."""
    step = base // modulus
    if histogram.ndim == 1:
        return histogram.reshape(step, modulus).sum(axis=0)
    return histogram.reshape(step, modulus, step, modulus).sum(axis=(0, 2))


def _allowed_breakers(rows: int, max_breakers: int, share: float) -> int:
    return min(max_breakers, int(share * rows))


def _signed(value: int, modulus: int) -> int:
    value %= modulus
    return value - modulus if value > modulus // 2 else value


def _canonical_key(a: int, b: int, modulus: int, units) -> tuple[int, int]:
    return min(((u * a) % modulus, (u * b) % modulus) for u in units)


def _pair_covers(a: int, b: int, modulus: int, moduli) -> set:
    """The (modulus, key) of the weaker pair facts that this pair fact mod ``modulus`` implies."""
    covered = set()
    for d in moduli:
        if d < modulus and modulus % d == 0 and a % d and b % d and math.gcd(a, b, d) == 1:
            units = [u for u in range(1, d) if math.gcd(u, d) == 1]
            covered.add((d, _canonical_key(a, b, d, units)))
    return covered


def _canonical_pairs(modulus: int, max_coefficient: int) -> dict:
    """Canonical coefficient pairs mod ``modulus``: key -> signed display coefficients."""
    units = [u for u in range(1, modulus) if math.gcd(u, modulus) == 1]
    found = {}
    small = [c for c in range(-max_coefficient, max_coefficient + 1) if c % modulus]
    for a in small:
        for b in small:
            if math.gcd(a, b, modulus) != 1:
                continue
            key = _canonical_key(a, b, modulus, units)
            if key not in found:
                found[key] = (_signed(key[0], modulus), _signed(key[1], modulus))
    return found


def _residue_labels(keys, modulus: int) -> np.ndarray:
    """For each key k and each cell (x, y) of a modulus x modulus grid (flattened), the bin
    k*modulus + (key[0]*x + key[1]*y mod modulus): one count over these bins gives the rows
    by residue of every key at once."""
    grid_x, grid_y = np.indices((modulus, modulus))
    return np.concatenate([
        k * modulus + ((key[0] * grid_x + key[1] * grid_y) % modulus).ravel()
        for k, key in enumerate(keys)]) if keys else np.zeros(0, dtype=np.int64)


def _integer_relations(relations) -> list[tuple[dict, int]]:
    """Relations ``sum(c_i x_i) = k`` as integer coefficient maps, denominators cleared."""
    result = []
    for relation in relations:
        if isinstance(relation, tuple) and len(relation) == 2 and isinstance(relation[0], Mapping):
            terms, constant = relation
        else:
            terms, constant = getattr(relation, "terms", None), getattr(relation, "constant", None)
            if terms is None or constant is None:
                raise StepError(f"relation {relation!r}: expected (coefficients, constant) or an "
                                "object with terms and constant.")
        items = dict(terms.items() if isinstance(terms, Mapping) else terms)
        numbers = [Fraction(c) for c in items.values()] + [Fraction(constant)]
        scale = math.lcm(*(f.denominator for f in numbers))
        result.append(({str(k): int(Fraction(c) * scale) for k, c in items.items()},
                       int(Fraction(constant) * scale)))
    return result


def follows_from_relation(terms: Mapping[str, int], modulus: int, residue: int,
                          relation: tuple[Mapping[str, int], int]) -> bool:
    """Whether ``sum(terms) ≡ residue (mod modulus)`` is a multiple of an exact relation.

    ``relation`` is ``(coefficients, constant)`` for ``sum(c_i x_i) = constant``; the
    congruence follows when some integer t gives ``coef_i ≡ t*c_i`` for every column and
    ``residue ≡ t*constant``, all modulo ``modulus``.
    """
    coefficients, constant = relation
    names = set(terms) | set(coefficients)
    for t in range(modulus):
        if (residue - t * constant) % modulus:
            continue
        if all((terms.get(n, 0) - t * coefficients.get(n, 0)) % modulus == 0 for n in names):
            return True
    return False


def _violating_ids(values: np.ndarray, residue: int, row_ids: np.ndarray, limit: int) -> tuple:
    broken = np.flatnonzero(values != residue)[:limit]
    return tuple(row_ids[broken].tolist())


def _strongest(candidates: list[dict]) -> list[dict]:
    """Drop facts whose modulus divides a stronger one's with as few breakers (same key)."""
    kept = []
    for fact in candidates:
        stronger = [other for other in candidates if other is not fact
                    and other["group"] == fact["group"] and other["modulus"] % fact["modulus"] == 0
                    and other["modulus"] > fact["modulus"]
                    and (fact["modulus"], fact["key"]) in other["covers"]
                    and other["breakers"] == fact["breakers"]]
        if not stronger:
            kept.append(fact)
        else:
            best = max(stronger, key=lambda other: other["modulus"])
            best["implied"].add(fact["modulus"])
    return kept


def _validate(moduli, max_coefficient, max_breakers, max_breaker_share, min_distinct,
              max_listed_rows) -> list[int]:
    moduli = sorted(set(moduli)) if not isinstance(moduli, int) else None
    if not moduli or any(not isinstance(m, (int, np.integer)) or isinstance(m, bool)
                         or not 2 <= m <= MAX_MODULUS for m in moduli):
        raise StepError(f"moduli: expected whole numbers from 2 to {MAX_MODULUS}, "
                        f"got {moduli!r}.")
    for name, value, low in (("max_coefficient", max_coefficient, 1),
                             ("max_breakers", max_breakers, 0), ("min_distinct", min_distinct, 2),
                             ("max_listed_rows", max_listed_rows, 0)):
        if not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low:
            raise StepError(f"{name}: expected a whole number of at least {low}, got {value!r}.")
    if not 0 <= max_breaker_share < 0.5:
        raise StepError(f"max_breaker_share: expected a share from 0 to below 0.5, "
                        f"got {max_breaker_share!r}.")
    return [int(m) for m in moduli]


def _single_facts(column: _Column, moduli, settings) -> list[dict]:
    """Every single-column congruence on ``column`` before the strongest-modulus rule."""
    rows = len(column.exact)
    allowed = _allowed_breakers(rows, settings["max_breakers"], settings["share"])
    facts = []
    for base, residues in column.residues.items():
        histogram = np.bincount(residues, minlength=base)
        for m in settings["owned"][base]:
            counts = _fold(histogram, base, m)
            residue = int(np.argmax(counts))
            breakers = rows - int(counts[residue])
            if breakers > allowed:
                continue
            reduced = residues % m
            if not _distinct_at_least(column.exact[reduced == residue], settings["min_distinct"]):
                continue
            facts.append({"group": (column.name,), "modulus": m, "residue": residue,
                          "breakers": breakers, "terms": ((column.name, 1),),
                          "key": (1,), "implied": set(),
                          "covers": {(d, (1,)) for d in moduli if m % d == 0 and d < m},
                          "values": reduced, "mask": column.present})
    return facts


def _determined(column: _Column, coef: int, modulus: int, singles: dict, constants: set) -> bool:
    """Whether ``coef * column`` mod ``modulus`` is fixed by a single fact or a constant column."""
    if column.name in constants:
        return True
    need = modulus // math.gcd(coef, modulus)
    return any(known % need == 0 for known in singles.get(column.name, ()))


def _joint_residues(first: _Column, second: _Column, x_rows, y_rows) -> dict:
    """For each base modulus, the rows counted by their pair of residues (a base x base grid).

    Two narrow columns are first counted by their pair of values, in one pass over the rows;
    the residues are then read off the distinct pairs, each with its count.
    """
    bases = list(first.residues)
    if first.span and second.span and first.span * second.span <= max(
            _GRID_SPAN, 4 * len(first.exact)):
        key = (first.exact[x_rows] - first.low) * second.span + (
            second.exact[y_rows] - second.low)
        counts = np.bincount(key, minlength=first.span * second.span)
        pairs = np.flatnonzero(counts)
        weights = counts[pairs]
        x, y = pairs // second.span + first.low, pairs % second.span + second.low
        return {base: np.bincount((x % base) * base + y % base, weights=weights,
                                  minlength=base * base).astype(np.int64).reshape(base, base)
                for base in bases}
    joints = {}
    for base in bases:
        x, y = first.residues[base][x_rows], second.residues[base][y_rows]
        joints[base] = np.bincount(x * base + y, minlength=base * base).reshape(base, base)
    return joints


def _pair_facts(first: _Column, second: _Column, moduli, settings, singles, constants):
    """Every pair congruence on two columns before the strongest-modulus rule."""
    both = first.present & second.present
    x_rows, y_rows = both[first.present], both[second.present]
    rows = int(both.sum())
    allowed = _allowed_breakers(rows, settings["max_breakers"], settings["share"])
    facts = []
    for base, joint in _joint_residues(first, second, x_rows, y_rows).items():
        x = y = None  # the residues row by row, taken when a congruence is close
        for m in settings["owned"][base]:
            # rows by residue of every canonical pair at once: counts[k, r] for key k
            keys = settings["pairs"][m]
            if not keys:
                continue
            folded = _fold(joint, base, m).ravel()
            counts = np.bincount(settings["labels"][m], weights=np.tile(folded, len(keys)),
                                 minlength=len(keys) * m).reshape(len(keys), m)
            residues = counts.argmax(axis=1).tolist()
            best = counts.max(axis=1).tolist()
            for (key, (a, b)), residue, top in zip(keys.items(), residues, best):
                breakers = rows - int(top)
                if breakers > allowed or _determined(first, a, m, singles, constants) \
                        or _determined(second, b, m, singles, constants):
                    continue
                if x is None:
                    x, y = first.residues[base][x_rows], second.residues[base][y_rows]
                values = (key[0] * (x % m) + key[1] * (y % m)) % m
                combined = _combination(first.exact[x_rows], second.exact[y_rows], a, b)
                if not _distinct_at_least(combined[values == residue], settings["min_distinct"]):
                    continue
                facts.append({"group": (first.name, second.name), "modulus": m,
                              "key": key, "residue": residue, "breakers": breakers,
                              "terms": ((first.name, a), (second.name, b)),
                              "covers": _pair_covers(a, b, m, moduli), "implied": set(),
                              "values": values, "mask": both})
    return facts


def _combination(x: np.ndarray, y: np.ndarray, a: int, b: int) -> np.ndarray:
    """The exact values of ``a*x + b*y`` (Python integers when int64 could overflow)."""
    if x.dtype != object and y.dtype != object:
        return a * x + b * y  # both below 2**62 and |a|, |b| small: no overflow
    return np.array([a * u + b * v for u, v in zip(x.tolist(), y.tolist())], dtype=object)


def _to_congruence(fact: dict, row_ids: np.ndarray, limit: int) -> Congruence:
    ids = row_ids[fact["mask"]]
    return Congruence(
        terms=fact["terms"], modulus=fact["modulus"], residue=fact["residue"],
        holds_on=int(fact["mask"].sum()),
        violations=_violating_ids(fact["values"], fact["residue"], ids, limit),
        violation_count=fact["breakers"], implied_moduli=tuple(sorted(fact["implied"])))


def joined_congruences(congruences: Sequence[Congruence]) -> list[Congruence]:
    """Congruences of the same sum that every row obeys, joined by the Chinese remainder
    theorem: ``x ≡ 0 (mod 4)`` and ``x ≡ 0 (mod 10)`` are ``x ≡ 0 (mod 20)``, said once.

    Only facts with no breaker are joined (then both hold on each row, so their join does
    too); the joined fact lists the moduli it makes redundant. Others are left as they are.
    """
    out = list(congruences)
    joined = True
    while joined:
        joined = False
        for i, j in combinations(range(len(out)), 2):
            a, b = out[i], out[j]
            if a.terms != b.terms or a.violation_count or b.violation_count \
                    or a.holds_on != b.holds_on \
                    or a.modulus % b.modulus == 0 or b.modulus % a.modulus == 0:
                continue
            modulus = math.lcm(a.modulus, b.modulus)
            residue = next(r for r in range(a.residue, modulus, a.modulus)
                           if r % b.modulus == b.residue)
            implied = set(a.implied_moduli) | set(b.implied_moduli) | {a.modulus, b.modulus}
            out[i] = Congruence(terms=a.terms, modulus=modulus, residue=residue,
                                holds_on=a.holds_on, implied_moduli=tuple(sorted(implied)))
            del out[j]
            joined = True
            break
    return out


def simplicity_key(congruence: Congruence) -> tuple:
    """The ranking: fewer terms, smaller coefficients, larger modulus, fewer breakers (then
    names, coefficients and residue, so that the order never depends on the search's)."""
    return (len(congruence.terms), sum(abs(c) for _, c in congruence.terms),
            -congruence.modulus, congruence.violation_count,
            tuple(name for name, _ in congruence.terms),
            tuple(c for _, c in congruence.terms), congruence.residue)


def find_congruences(columns: Mapping[str, Sequence], row_ids: Sequence, *,
                     moduli: Sequence[int] = MODULI, max_coefficient: int = 3,
                     max_breakers: int = 3, max_breaker_share: float = 0.01,
                     min_distinct: int = 3, relations=(),
                     max_listed_rows: int = MAX_LISTED_ROWS) -> list[Congruence]:
    """Congruences of single columns and of pairs with small coefficients, simplest first.

    ``columns`` maps a column name to its exact integer values (Python ints of any size,
    numpy integer arrays, integral floats), with None or NaN for a missing value; ``row_ids``
    gives the id of each row. A congruence is kept when it holds on every checked row or on
    all but ``min(max_breakers, max_breaker_share * rows)`` of them. ``max_coefficient``
    bounds |a| and |b| in pairs ``a*x + b*y``. ``relations`` are exact relations already
    found, each ``(mapping column -> coef, constant)`` for ``sum(coef * column) = constant``
    or an object with ``terms`` and ``constant`` (such as the relations step's Relation);
    congruences that follow from one of them are left out. ``min_distinct`` is the distinct
    value rule of the module docstring. Raises ``StepError`` on bad settings or values.

    >>> [c.text for c in find_congruences({"n": [2, 4, 8, 10]}, [0, 1, 2, 3])]
    ['n ≡ 0 (mod 2)']
    """
    moduli = _validate(moduli, max_coefficient, max_breakers, max_breaker_share, min_distinct,
                       max_listed_rows)
    ids = np.asarray(list(row_ids), dtype=object)
    prepared = _prepare(columns, len(ids), moduli)
    settings = {"max_breakers": int(max_breakers), "share": float(max_breaker_share),
                "min_distinct": int(min_distinct), "owned": _owned_moduli(moduli),
                "pairs": {m: _canonical_pairs(m, int(max_coefficient)) for m in moduli}}
    settings["labels"] = {m: _residue_labels(list(keys), m)
                          for m, keys in settings["pairs"].items()}
    known = _integer_relations(relations)
    constants = {c.name for c in prepared if len(c.exact) and not _distinct_at_least(c.exact, 2)}
    facts, singles = [], {}
    for column in prepared:
        if column.name in constants:
            continue
        found = _strongest(_single_facts(column, moduli, settings))
        singles[column.name] = [f["modulus"] for f in found]
        facts.extend(found)
    varying = [c for c in prepared if c.name not in constants and len(c.exact)]
    for first, second in combinations(varying, 2):
        facts.extend(_strongest(_pair_facts(first, second, moduli, settings, singles,
                                            constants)))
    result = []
    for fact in facts:
        terms = dict(fact["terms"])
        if any(follows_from_relation(terms, fact["modulus"], fact["residue"], relation)
               for relation in known):
            continue
        result.append(_to_congruence(fact, ids, int(max_listed_rows)))
    return sorted(joined_congruences(result), key=simplicity_key)


def proposed_congruences(columns: Mapping[str, Sequence], row_ids: Sequence, *,
                         moduli: Sequence[int] = MODULI) -> dict:
    """Candidates for :func:`settle_congruences`, proposed on some rows (``columns`` and
    ``row_ids`` as :func:`find_congruences` takes them) to be counted on every row:
    ``{(terms, modulus, residue): congruence}`` of the congruences found one modulus at a
    time, so that no fact of these rows hides a weaker modulus, or a pair, that only every
    row can settle."""
    return {(c.terms, modulus, c.residue): c for modulus in moduli
            for c in find_congruences(columns, row_ids, moduli=[modulus])}


def _fact_of(congruence: Congruence, moduli: Sequence[int]) -> dict:
    """A congruence as the fact record the strongest-modulus rule reads."""
    m = congruence.modulus
    if len(congruence.terms) == 1:
        key, covers = (1,), {(d, (1,)) for d in moduli if m % d == 0 and d < m}
    else:
        (_, a), (_, b) = congruence.terms
        units = [u for u in range(1, m) if math.gcd(u, m) == 1]
        key, covers = _canonical_key(a % m, b % m, m, units), _pair_covers(a, b, m, moduli)
    return {"group": tuple(name for name, _ in congruence.terms), "modulus": m, "key": key,
            "covers": covers, "breakers": congruence.violation_count, "implied": set(),
            "congruence": congruence}


def settle_congruences(candidates: Sequence[Congruence], *, moduli: Sequence[int] = MODULI,
                       max_breakers: int = 3, max_breaker_share: float = 0.01,
                       constants: Sequence[str] = (), relations=()) -> list[Congruence]:
    """The congruences :func:`find_congruences` keeps, from candidates counted elsewhere.

    For an engine that proposes congruences on some rows and counts each on every row:
    ``candidates`` carry the counts over every row (``holds_on``, ``violation_count``,
    ``violations``; each modulus and residue its own candidate, single-column facts with
    coefficient 1 and pairs in canonical form, as :func:`find_congruences` writes them, whose
    obeying rows were already seen to hold ``min_distinct`` values). The same rules then
    apply: the breaker limit, the strongest modulus, pairs whose term a kept single-column
    fact (or a column in ``constants``) determines, congruences that follow from one of the
    exact ``relations``; simplest first.
    """
    moduli = _validate(moduli, 1, max_breakers, max_breaker_share, 2, 0)
    fit = [c for c in candidates if c.modulus in moduli
           and not any(name in constants for name, _ in c.terms)
           and c.violation_count <= _allowed_breakers(c.holds_on, int(max_breakers),
                                                      float(max_breaker_share))]
    singles_by_column: dict[str, list[dict]] = {}
    pairs_by_group: dict[tuple, list[dict]] = {}
    for congruence in fit:
        fact = _fact_of(congruence, moduli)
        target = singles_by_column if len(congruence.terms) == 1 else pairs_by_group
        target.setdefault(fact["group"][0] if len(congruence.terms) == 1 else fact["group"],
                          []).append(fact)
    facts, singles = [], {}
    for name, found in singles_by_column.items():
        kept = _strongest(found)
        singles[name] = [f["modulus"] for f in kept]
        facts.extend(kept)
    for found in pairs_by_group.values():
        open_pairs = []
        for fact in found:
            (first, a), (second, b) = fact["congruence"].terms
            m = fact["modulus"]
            if not (_determined(_Named(first), a, m, singles, set(constants))
                    or _determined(_Named(second), b, m, singles, set(constants))):
                open_pairs.append(fact)
        facts.extend(_strongest(open_pairs))
    known = _integer_relations(relations)
    result = []
    for fact in facts:
        congruence = fact["congruence"]
        if any(follows_from_relation(dict(congruence.terms), congruence.modulus,
                                     congruence.residue, relation) for relation in known):
            continue
        result.append(Congruence(
            terms=congruence.terms, modulus=congruence.modulus, residue=congruence.residue,
            holds_on=congruence.holds_on, violations=congruence.violations,
            violation_count=congruence.violation_count,
            implied_moduli=tuple(sorted(fact["implied"]))))
    return sorted(joined_congruences(result), key=simplicity_key)


@dataclass(frozen=True)
class _Named:
    """A column known by its name alone (all that the determined-term rule reads)."""

    name: str
