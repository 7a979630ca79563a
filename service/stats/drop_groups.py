"""Which columns each drop-term likelihood-ratio test removes, and what kind of test it is.

For a model with features and two-way interactions ``a:b`` (``term_groups`` of
:class:`~service.stats.design.Encoding`), one test per

* ``"main effect"``: a feature in no interaction, all its columns;
* ``"interaction"``: an interaction ``a:b``, all its columns;
* ``"main effect, interactions kept"``: a feature that also appears in an interaction, only its
  own columns. The reduced model then keeps ``a:b`` without ``a``; what the test measures
  depends on where ``b`` is centred (coding of ``b``), so it is no test of ``a`` as a whole;
* ``"main effect with its interactions"``: that feature's columns together with those of every
  interaction containing it, the test that respects marginality (an interaction is not kept
  without its main effects; common practice in model-building texts, e.g. Nelder's principle
  of marginality, McCullagh & Nelder, *Generalized Linear Models*, 2nd ed., 1989, sec. 3.9).
  Its name is ``"<feature> with interactions"``.

Each entry also lists the term groups dropped (``dropped``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

__all__ = [
    "INTERACTION",
    "MAIN_EFFECT",
    "MAIN_EFFECT_ONLY",
    "MAIN_EFFECT_WITH_INTERACTIONS",
    "DropGroup",
    "drop_groups",
]

MAIN_EFFECT = "main effect"
INTERACTION = "interaction"
MAIN_EFFECT_ONLY = "main effect, interactions kept"
MAIN_EFFECT_WITH_INTERACTIONS = "main effect with its interactions"
WITH_SUFFIX = " with interactions"


@dataclass(frozen=True)
class DropGroup:
    """The columns a drop-term test sets to 0, its kind and the term groups they belong to."""

    columns: tuple[int, ...]
    kind: str
    dropped: tuple[str, ...]


def drop_groups(
    term_groups: Mapping[str, Sequence[int]],
    interactions: Sequence[Sequence[str]],
    intercept: str = "intercept",
) -> dict[str, DropGroup]:
    """One :class:`DropGroup` per test (module docstring), in ``term_groups`` order, the
    marginality-respecting tests last (in feature order)."""
    pairs = [(str(a), str(b)) for a, b in interactions]
    names = {f"{a}:{b}" for a, b in pairs}
    out: dict[str, DropGroup] = {}
    nested: list[str] = []
    for name, cols in term_groups.items():
        if name == intercept:
            continue
        if name in names:
            out[name] = DropGroup(tuple(cols), INTERACTION, (name,))
            continue
        within = [f"{a}:{b}" for a, b in pairs if name in (a, b)]
        kind = MAIN_EFFECT_ONLY if within else MAIN_EFFECT
        out[name] = DropGroup(tuple(cols), kind, (name,))
        if within:
            nested.append(name)
    for name in nested:
        within = [f"{a}:{b}" for a, b in pairs if name in (a, b)]
        cols = sorted({int(c) for g in (name, *within) for c in term_groups[g]})
        out[name + WITH_SUFFIX] = DropGroup(
            tuple(cols), MAIN_EFFECT_WITH_INTERACTIONS, (name, *within)
        )
    return out
