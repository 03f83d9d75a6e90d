"""What a researcher describes when asking "what should I try?"."""

from __future__ import annotations

from dataclasses import asdict, dataclass

from facility.errors import Invalid
from facility.instruments.models import InstrumentKind, VacuumMode
from facility.logbook.models import CoatingMaterial, Conductivity, MaterialClass, SpecimenForm

# Weights of the similarity score. Attributes that decide charging and resolution weigh most
# (conductivity, material class), then the specimen's form and scale (common practice, no source).
WEIGHTS = {
    "material_class": 3.0,
    "conductivity": 3.0,
    "form": 2.0,
    "feature_size_nm": 2.0,
    "text": 3.0,
    "beam_sensitive": 1.0,
    "coating": 1.0,
    "vacuum_mode": 1.0,
    "instrument_kind": 1.0,
}


@dataclass(frozen=True)
class Criteria:
    text: str = ""
    material_class: str | None = None
    conductivity: str | None = None
    form: str | None = None
    feature_size_nm: float | None = None
    beam_sensitive: bool | None = None
    coating: str | None = None
    vacuum_mode: str | None = None
    instrument_kind: str | None = None

    def given(self) -> list[str]:
        names = [k for k, v in asdict(self).items() if v not in (None, "")]
        return ["text" if n == "text" else n for n in names]

    def max_score(self) -> float:
        return sum(WEIGHTS[name] for name in self.given())


_CHOICES = {
    "material_class": MaterialClass,
    "conductivity": Conductivity,
    "form": SpecimenForm,
    "coating": CoatingMaterial,
    "vacuum_mode": VacuumMode,
    "instrument_kind": InstrumentKind,
}


def make_criteria(**raw: object) -> Criteria:
    """Build criteria from form or API input, refusing unknown values with a clear message."""
    errors: dict[str, list[str]] = {}
    values: dict[str, object] = {}
    for name, choices in _CHOICES.items():
        value = raw.get(name)
        if value in (None, ""):
            continue
        if value not in choices.values:
            errors[name] = [f"Use one of {', '.join(choices.values)}."]
        values[name] = value
    size = raw.get("feature_size_nm")
    if size not in (None, ""):
        try:
            number = float(size)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            number = -1.0
        if not 0 < number < 1e7:
            errors["feature_size_nm"] = ["A size in nm, more than 0."]
        values["feature_size_nm"] = number
    sensitive = raw.get("beam_sensitive")
    if sensitive not in (None, ""):
        if isinstance(sensitive, bool):
            values["beam_sensitive"] = sensitive
        elif str(sensitive).lower() in {"1", "true", "yes", "on"}:
            values["beam_sensitive"] = True
        elif str(sensitive).lower() in {"0", "false", "no", "off"}:
            values["beam_sensitive"] = False
        else:
            errors["beam_sensitive"] = ["Yes or no."]
    text = str(raw.get("text") or "").strip()
    if len(text) > 300:
        errors["text"] = ["At most 300 characters."]
    if errors:
        raise Invalid("Some search fields are not valid: " + ", ".join(errors) + ".", fields=errors)
    criteria = Criteria(text=text, **values)  # type: ignore[arg-type]
    if not criteria.given():
        raise Invalid("Describe the specimen: give at least one attribute or some text.")
    return criteria
