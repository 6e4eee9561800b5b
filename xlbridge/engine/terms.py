"""Model specifications: turn a model spec into named monomial terms.

A term is a monomial in the predictors, held as a tuple of exponents (one per predictor).
The intercept is the all-zero exponent tuple and is kept separately (``ModelSpec.intercept``).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from itertools import combinations

from .errors import ModelError, ModelErrorKind, did_you_mean

__all__ = ["ModelError", "ModelErrorKind", "ModelSpec", "parse_model", "term_label",
           "default_names", "MAX_DEGREE"]

MAX_DEGREE = 10
SURFACE_MIN, SURFACE_MAX = 2, 6
KINDS = ("polynomial", "surface", "linear", "interact", "terms")
MODEL_WORDS = ("surface", "linear", "interact")  # the model keywords a user types


Powers = tuple[int, ...]


@dataclass(frozen=True)
class ModelSpec:
    """Named terms of a linear-in-parameters model."""

    spec: str
    kind: str
    predictors: tuple[str, ...]
    powers: tuple[Powers, ...]  # non-intercept terms, in model order
    intercept: bool = True
    degree: int | None = None  # polynomial degree (kind == "polynomial")
    notes: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        # computed once: a fit reads them many times (per coefficient, per check); set past
        # the frozen guard, outside the fields, so equality, repr and replace are unchanged
        zero = (0,) * len(self.predictors)
        every = ((zero,) if self.intercept else ()) + tuple(self.powers)
        object.__setattr__(self, "_all_powers", every)
        object.__setattr__(self, "_terms", tuple(term_label(p, self.predictors) for p in every))

    @property
    def k(self) -> int:
        return len(self.predictors)

    @property
    def all_powers(self) -> tuple[Powers, ...]:
        """Exponent tuples of every column, intercept first when present."""
        return self._all_powers

    @property
    def terms(self) -> tuple[str, ...]:
        """Term labels of every column, 'intercept' first when present."""
        return self._terms

    @property
    def n_params(self) -> int:
        return len(self.powers) + int(self.intercept)

    def top_order(self) -> int:
        """Highest total degree among the terms."""
        return max(sum(p) for p in self.powers)

    def centrable(self) -> tuple[bool, ...]:
        """Per predictor: can it be shifted without changing the model's column space?

        A shift of x_j maps x_j^e onto all lower powers of x_j (other exponents unchanged),
        so it is allowed exactly when the term set, intercept included, is closed under
        lowering the exponent of x_j.
        """
        have = set(self.all_powers)
        out = []
        for j in range(self.k):
            ok = True
            for p in have:
                for e in range(p[j]):
                    if p[:j] + (e,) + p[j + 1 :] not in have:
                        ok = False
            out.append(ok)
        return tuple(out)


def term_label(p: Powers, names: tuple[str, ...]) -> str:
    if not any(p):
        return "intercept"
    parts = []
    for name, e in zip(names, p):
        if e == 1:
            parts.append(name)
        elif e > 1:
            parts.append(f"{name}^{e}")
    return "*".join(parts)


def default_names(k: int) -> tuple[str, ...]:
    return ("x",) if k == 1 else tuple(f"x{i + 1}" for i in range(k))


def _unit(k: int, j: int, e: int = 1) -> Powers:
    return tuple(e if i == j else 0 for i in range(k))


def _pair(k: int, i: int, j: int) -> Powers:
    return tuple(1 if m in (i, j) else 0 for m in range(k))


def _as_degree(model: object) -> int | None:
    """An int degree from an int, an integral float, or digits in text; None otherwise."""
    if isinstance(model, bool):
        return None
    if isinstance(model, int):
        return model
    if isinstance(model, float) and model.is_integer():
        return int(model)
    if isinstance(model, str):
        text = model.strip().lower()
        m = re.fullmatch(r"(?:degree\s*)?(\d+)(?:\.0*)?", text)
        if m:
            return int(m.group(1))
    return None


def parse_model(
    model: object,
    k: int,
    names: tuple[str, ...] | None = None,
    intercept: bool = True,
    *,
    forms: tuple[str, ...] = (),
) -> ModelSpec:
    """Build a ModelSpec for ``k`` predictors from an int degree or a spec string.

    ``forms`` are further model words the caller accepts (e.g. CER forms): a misspelled
    one-word model is matched against them too in the message."""
    names = tuple(names) if names is not None else default_names(k)
    if len(names) != k:
        raise ModelError(f"{len(names)} predictor names given for {k} predictor columns",
                         ModelErrorKind.SPEC)
    if len({n.lower() for n in names}) != k:
        raise ModelError(f"predictor names must differ: {', '.join(names)}", ModelErrorKind.SPEC)
    if isinstance(model, float) and not model.is_integer():
        raise ModelError(
            f"model {model!r} is not a whole-number degree; give a degree 1-{MAX_DEGREE} (one x "
            "column), 'surface', 'linear', 'interact' or a term list", ModelErrorKind.SPEC)
    degree = _as_degree(model)
    if degree is not None:
        if k != 1:
            raise ModelError(
                f"a polynomial degree needs one predictor column; x has {k} "
                "(use model 'surface', 'linear', 'interact' or a term list)",
                ModelErrorKind.SPEC,
            )
        if not 1 <= degree <= MAX_DEGREE:
            raise ModelError(f"degree must be 1 to {MAX_DEGREE}; got {degree}", ModelErrorKind.SPEC)
        powers = tuple((e,) for e in range(1, degree + 1))
        return _spec(f"degree {degree}", "polynomial", names, powers, intercept, degree)
    if not isinstance(model, str) or not model.strip():
        raise ModelError(
            "model must be a degree 1-10, 'surface', 'linear', 'interact' or a term list "
            f"such as '{names[0]}, {names[0]}^2'; got {model!r}",
            ModelErrorKind.SPEC,
        )
    text = model.strip()
    key = text.lower()
    if key == "linear":
        powers = tuple(_unit(k, j) for j in range(k))
        return _spec("linear", "linear", names, powers, intercept)
    if key == "interact":
        if k < 2:
            raise ModelError("model 'interact' needs at least 2 predictor columns; x has 1",
                             ModelErrorKind.SPEC)
        powers = tuple(_unit(k, j) for j in range(k))
        powers += tuple(_pair(k, i, j) for i, j in combinations(range(k), 2))
        return _spec("interact", "interact", names, powers, intercept)
    if key == "surface":
        if not SURFACE_MIN <= k <= SURFACE_MAX:
            raise ModelError(
                f"model 'surface' needs {SURFACE_MIN} to {SURFACE_MAX} predictor columns; "
                f"x has {k}",
                ModelErrorKind.SPEC,
            )
        powers = tuple(_unit(k, j) for j in range(k))
        powers += tuple(_unit(k, j, 2) for j in range(k))
        powers += tuple(_pair(k, i, j) for i, j in combinations(range(k), 2))
        return _spec("surface", "surface", names, powers, intercept)
    if re.fullmatch(r"[^\s,*^]+", text) and key not in {n.lower() for n in names}:
        raise ModelError(_unknown_word(text, names, forms), ModelErrorKind.SPEC)
    return _spec(text, "terms", names, _parse_terms(text, names), intercept)


def _unknown_word(word: str, names: tuple[str, ...], forms: tuple[str, ...]) -> str:
    """A one-word model that is neither a keyword nor a predictor: list what is valid."""
    words = MODEL_WORDS + tuple(forms)
    listed = ", ".join(repr(w) for w in words)
    return (f"unknown model {word!r}{did_you_mean(word, words + names) or '.'} A model is a degree "
            f"1-{MAX_DEGREE} (one x column), {listed}, or a term list of the predictors "
            f"({', '.join(names)}) such as '{names[0]}, {names[0]}^2'")


def _parse_terms(text: str, names: tuple[str, ...]) -> tuple[Powers, ...]:
    k = len(names)
    lookup = {n.strip().lower(): j for j, n in enumerate(names)}
    out: list[Powers] = []
    for raw in text.split(","):
        term = raw.strip()
        if not term:
            raise ModelError(f"empty term in model {text!r}", ModelErrorKind.SPEC)
        exps = [0] * k
        for factor in term.split("*"):
            m = re.fullmatch(r"\s*(.+?)\s*(?:\^\s*(\d+)\s*)?", factor)
            name = m.group(1).strip().lower() if m else ""
            if name not in lookup:
                raise ModelError(
                    f"unknown predictor {factor.strip()!r} in term {term!r}"
                    f"{did_you_mean(name, names) or ';'} predictors are: {', '.join(names)}",
                    ModelErrorKind.SPEC,
                )
            e = int(m.group(2)) if m and m.group(2) else 1
            if e < 1:
                raise ModelError(f"power must be at least 1 in term {term!r}", ModelErrorKind.SPEC)
            exps[lookup[name]] += e
        p = tuple(exps)
        if sum(p) > MAX_DEGREE:
            raise ModelError(f"term {term!r} has total degree above {MAX_DEGREE}",
                             ModelErrorKind.SPEC)
        if p in out:
            raise ModelError(f"term {term!r} appears twice in the model", ModelErrorKind.SPEC)
        out.append(p)
    return tuple(out)


def _spec(
    spec: str,
    kind: str,
    names: tuple[str, ...],
    powers: tuple[Powers, ...],
    intercept: bool,
    degree: int | None = None,
) -> ModelSpec:
    if not powers:
        raise ModelError("the model has no terms", ModelErrorKind.SPEC)
    have = set(powers)
    notes = []
    for p in powers:
        missing = []
        for j, e in enumerate(p):
            if e:
                parent = p[:j] + (e - 1,) + p[j + 1 :]
                if any(parent) and parent not in have:
                    missing.append(term_label(parent, names))
        if missing:
            notes.append(
                f"term {term_label(p, names)} is in the model without its lower-order "
                f"term(s) {', '.join(dict.fromkeys(missing))}: the model is not hierarchical, "
                "so its fit depends on where each predictor's zero is"
            )
    return ModelSpec(spec, kind, names, powers, intercept, degree, tuple(notes))
