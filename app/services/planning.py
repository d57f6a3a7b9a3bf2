"""Planning targets as the Corpus page, the Estimator and the API take them: at most one of a number of
types, a new-type rate, a coverage or a share of all types (``app.core.planning.Target``)."""

from __future__ import annotations

from app.core.planning import Target

TARGET_KINDS = ("types", "new_type_rate", "coverage", "share")
"""The kinds of target, in the order the forms and the API list them."""


class TargetChoiceError(ValueError):
    """Several targets given where one is asked for, or none where one is needed; ``given`` names them
    (each caller words the message in its own field names)."""

    def __init__(self, given: tuple[str, ...]) -> None:
        super().__init__(f"give exactly one planning target ({', '.join(TARGET_KINDS)}); given: {given}")
        self.given = given


class TargetValueError(ValueError):
    """A target outside its range (e.g. a coverage of 1); ``kind`` names the target, the message says why."""

    def __init__(self, kind: str, message: str) -> None:
        super().__init__(message)
        self.kind = kind


def planning_target(
    types: float | None = None,
    new_type_rate: float | None = None,
    coverage: float | None = None,
    share: float | None = None,
    *,
    required: bool = True,
) -> Target | None:
    """The one target given (``None`` stands for a field left empty). Nothing given: None, or
    ``TargetChoiceError`` when ``required``; several: ``TargetChoiceError``; a value outside its range:
    ``TargetValueError`` naming the target."""
    values = {"types": types, "new_type_rate": new_type_rate, "coverage": coverage, "share": share}
    given = {kind: value for kind, value in values.items() if value is not None}
    if not given and not required:
        return None
    if len(given) != 1:
        raise TargetChoiceError(tuple(given))
    ((kind, value),) = given.items()
    try:
        return Target(kind, value)
    except ValueError as exc:
        raise TargetValueError(kind, str(exc)) from exc
