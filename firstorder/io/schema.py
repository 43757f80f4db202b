"""The analysis file format, as pydantic models (imported only when a file is read).

The models are the single statement of what a file may hold: every field, its
type, its limits.  Validation is strict (no type coercion: ``"1"`` is not a
number, ``true`` is not ``1``) and closed (an unknown field is an error).
Numbers written as text (``"4.7k"``) are checked with the units layer only;
nothing in a file is evaluated.  What the schema cannot see (a part joining a
node to itself, a drive column for a part that does not exist) is checked by
the fixture and drive builders when the analysis is rebuilt.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal, Union

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    StrictBool,
    StrictFloat,
    StrictInt,
    StrictStr,
    model_validator,
)

from ..errors import InputError
from ..units import parse_value
from .analysis_format import (FORMAT_NAME, FORMAT_VERSION, MAX_CHANGES, MAX_COLUMNS, MAX_FRACTIONS, MAX_NAME,
                              MAX_NOTES, MAX_NUMBER_TEXT, MAX_PARTS, MAX_TITLE, MAX_UNITS, READ_VERSIONS)

#: The fields of a tolerance study (version 2).
STUDY_FIELDS = ("spread", "units", "seed", "fractions")

__all__ = ["AnalysisFile", "KINDS"]



def _fits_a_float(value: int) -> int:
    """A whole number the arithmetic can use (a float holds up to about 1.8e308)."""
    if abs(value) > _LARGEST_FLOAT:
        raise ValueError(f"value: a whole number of {len(str(abs(value)))} digits is too large; "
                         f"numbers must lie within ±1.8e308 (what a float holds)")
    return value


_LARGEST_FLOAT = int(1.7976931348623157e308)
Name = Annotated[StrictStr, Field(min_length=1, max_length=MAX_NAME)]
FiniteFloat = Annotated[StrictFloat, Field(allow_inf_nan=False)]
NumberText = Annotated[StrictStr, Field(min_length=1, max_length=MAX_NUMBER_TEXT)]
WholeNumber = Annotated[StrictInt, AfterValidator(_fits_a_float)]
# int before float: a whole number stays a whole number, as it was typed.
Quantity = Union[WholeNumber, FiniteFloat, NumberText]


def _quantity_check(unit: str, *, positive: bool = False, non_negative: bool = False,
                    allow_infinite: bool = False):
    """An after-validator that parses a quantity with the units layer and keeps it as typed."""

    def check(value: Any) -> Any:
        number = parse_value(value, field="value", unit=unit, positive=positive,
                             allow_infinite=allow_infinite)
        if non_negative and number < 0:
            raise ValueError(f"value: {value!r} must be >= 0")
        return value

    return AfterValidator(check)


class _Closed(BaseModel):
    """Strict and closed: no coercion, no unknown fields."""

    model_config = ConfigDict(extra="forbid", strict=True, frozen=True)


# -- parts ---------------------------------------------------------------------------
class _TwoNodes(_Closed):
    name: Name
    a: Name
    b: Name


class ResistorModel(_TwoNodes):
    kind: Literal["resistor"]
    value: Annotated[Quantity, _quantity_check("Ω", positive=True)]


class CapacitorModel(_TwoNodes):
    kind: Literal["capacitor"]
    value: Annotated[Quantity, _quantity_check("F", positive=True)]


class InductorModel(_TwoNodes):
    kind: Literal["inductor"]
    value: Annotated[Quantity, _quantity_check("H", positive=True)]


class SwitchModel(_TwoNodes):
    kind: Literal["switch"]
    r_on: Annotated[Quantity, _quantity_check("Ω", non_negative=True)] = 0
    r_off: Annotated[Quantity, _quantity_check("Ω", positive=True, allow_infinite=True)] = "inf"


class VoltageSourceModel(_TwoNodes):
    kind: Literal["voltage_source"]


class CurrentSourceModel(_TwoNodes):
    kind: Literal["current_source"]


PartModel = Annotated[
    Union[ResistorModel, CapacitorModel, InductorModel, SwitchModel, VoltageSourceModel, CurrentSourceModel],
    Field(discriminator="kind"),
]


class ProbeModel(_Closed):
    name: Name
    node: Name | None = None
    reference: Name = "gnd"
    through: Name | None = None


class FixtureModel(_Closed):
    parts: Annotated[list[PartModel], Field(min_length=1, max_length=MAX_PARTS)]
    probes: Annotated[list[ProbeModel], Field(max_length=MAX_PARTS)] = []


# -- drive -----------------------------------------------------------------------------
Level = Union[WholeNumber, FiniteFloat, StrictBool, NumberText]


class DriveModel(_Closed):
    times: Annotated[list[Quantity], Field(min_length=1, max_length=MAX_CHANGES)]
    end: Quantity
    columns: Annotated[
        dict[Name, Annotated[list[Level], Field(min_length=1, max_length=MAX_CHANGES)]],
        Field(min_length=1, max_length=MAX_COLUMNS),
    ]


# -- tolerance ---------------------------------------------------------------------------
Unit = Literal["V", "A"]


class AbsoluteModel(_Closed):
    kind: Literal["absolute"]
    value: Annotated[Quantity, _quantity_check(("V", "A"), positive=True)]
    unit: Unit = "V"


class RelativeModel(_Closed):
    kind: Literal["relative"]
    fraction: Annotated[Quantity, _quantity_check("", positive=True)]
    unit: Unit = "V"


class PpmModel(_Closed):
    kind: Literal["ppm"]
    ppm: Annotated[Quantity, _quantity_check("", positive=True)]
    span: Annotated[Quantity, _quantity_check(("V", "A"), positive=True)]
    unit: Unit = "V"


class LsbModel(_Closed):
    kind: Literal["lsb"]
    bits: Annotated[StrictInt, Field(ge=1, le=32)]
    span: Annotated[Quantity, _quantity_check(("V", "A"), positive=True)]
    fraction: Annotated[Quantity, _quantity_check("", positive=True)] = 0.5
    unit: Unit = "V"


ToleranceModel = Annotated[
    Union[AbsoluteModel, RelativeModel, PpmModel, LsbModel], Field(discriminator="kind")
]

Delay = Annotated[Quantity, _quantity_check("s", non_negative=True)]


def _known_version(version: int) -> int:
    if version > FORMAT_VERSION:
        raise ValueError(f"version: {version!r} is newer than this firstorder reads (version "
                         f"{FORMAT_VERSION}); the file was written by a newer firstorder, update to read it")
    if version not in READ_VERSIONS:
        raise ValueError(f"version: {version!r} is not a version this firstorder reads (it reads versions "
                         f"{', '.join(map(str, READ_VERSIONS))})")
    return version


# -- tolerance study (version 2) -----------------------------------------------------------
def _band_check(text: str) -> str:
    from ..studies.spread import band_from_text

    try:
        band_from_text(text, "value")
    except InputError as error:
        raise ValueError(str(error).replace("spread value: ", "value: ", 1)) from None
    return text


def _tempco_check(text: str) -> str:
    from ..studies.spread import Spread

    try:
        Spread({"value": "1%"}, temperature=(0, 1), tempco={"value": text})
    except InputError as error:
        raise ValueError(str(error).replace("spread tempco value: ", "value: ", 1)) from None
    return text


BandText = Annotated[StrictStr, Field(min_length=1, max_length=MAX_NUMBER_TEXT), AfterValidator(_band_check)]
TempcoText = Annotated[StrictStr, Field(min_length=1, max_length=MAX_NUMBER_TEXT), AfterValidator(_tempco_check)]


class SpreadModel(_Closed):
    """Each band in the spread's text form (``"1%"``, ``"50m .. 300m"``, ``"normal 3% within 9%"``),
    the temperature range in °C and the tempcos per kelvin."""

    bands: Annotated[dict[Name, BandText], Field(min_length=1, max_length=MAX_PARTS)]
    temperature: Annotated[list[Annotated[Quantity, _quantity_check(("°C", "C"))]],
                           Field(min_length=2, max_length=2)] | None = None
    tempco: Annotated[dict[Name, TempcoText], Field(max_length=MAX_PARTS)] = {}


Fraction = Annotated[FiniteFloat, Field(gt=0.0, le=1.0)]


#: The kinds each field of kinds of objects allows, to name them when a file leaves ``kind`` out.
KINDS = {
    "parts": tuple(model.model_fields["kind"].annotation.__args__[0] for model in (
        ResistorModel, CapacitorModel, InductorModel, SwitchModel, VoltageSourceModel, CurrentSourceModel)),
    "tolerance": tuple(model.model_fields["kind"].annotation.__args__[0] for model in (
        AbsoluteModel, RelativeModel, PpmModel, LsbModel)),
}


# -- the file ----------------------------------------------------------------------------------
class AnalysisFile(_Closed):
    format: Literal[FORMAT_NAME]
    version: Annotated[StrictInt, AfterValidator(_known_version)]
    saved_with: Annotated[StrictStr, Field(max_length=MAX_NAME)] = ""
    title: Annotated[StrictStr, Field(max_length=MAX_TITLE)] = ""
    notes: Annotated[StrictStr, Field(max_length=MAX_NOTES)] = ""
    fixture: FixtureModel
    drive: DriveModel
    initial: Quantity = 0.0
    tolerance: ToleranceModel | None = None
    sample_delay: Union[Delay, Annotated[list[Delay], Field(min_length=1, max_length=MAX_CHANGES)], None] = None
    # Version 2: a tolerance study of the lot.
    spread: SpreadModel | None = None
    units: Annotated[StrictInt, Field(ge=1, le=MAX_UNITS)] | None = None
    seed: Annotated[StrictInt, Field(ge=0, lt=2**63)] | None = None
    fractions: Annotated[list[Fraction], Field(min_length=1, max_length=MAX_FRACTIONS)] | None = None

    @model_validator(mode="after")
    def _study_fields_of_version_2(self) -> "AnalysisFile":
        given = [name for name in STUDY_FIELDS if getattr(self, name) is not None]
        if given and self.version < 2:
            raise ValueError(f"{given[0]}: is a field of version 2 files; this file says version {self.version}")
        if self.spread is None and given:
            raise ValueError(f"{given[0]}: given without a spread; a study needs the spread of the parts")
        return self
