"""The words each kind of survey speaks: one small vocabulary per kind.

A roof survey talks of a roof, its membrane and insulation, cores and board take-off; a
hull survey of a hull side (port or starboard), its laminate and core, meter readings and
percussion soundings. Every output that puts words in front of a user (``report.html``,
``map.html``, ``quantities.csv``, the warnings of ``summary.json``) takes them from
:func:`wording_for`, so that no roofing word reaches a marine surveyor's deliverable and
the two vocabularies live side by side in one place.

Examples
--------
>>> w = wording_for("hull", side="port")
>>> w.area, w.surface, w.wet_material, w.confirmations
('port hull side', 'laminate', 'core', 'readings')
>>> wording_for("roof").area_title
'Roof'
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Wording", "ROOF", "wording_for", "wording_of"]


@dataclass(frozen=True)
class Wording:
    """What the outputs call things on one kind of survey.

    Attributes
    ----------
    kind
        ``"roof"`` or ``"hull"``.
    area
        The surveyed area (``summary.json`` ``area_label``): ``"roof"``, ``"port hull side"``.
    area_short
        The same without the side: ``"roof"``, ``"hull side"``.
    kind_words
        The kind of survey for a title line: ``"low-slope roof"``, ``"hull side, port"``.
    surface
        The skin the camera sees: ``"membrane"``, ``"laminate"``.
    wet_material
        What holds the water: ``"insulation"``, ``"core"``.
    confirmation, confirmations
        The usual confirmation, singular and plural: ``"core"``/``"cores"``,
        ``"reading"``/``"readings"``.
    confirmations_all
        Every kind of confirmation, for headings: ``"cores and readings"``, ``"readings and soundings"``.
    confirmations_any
        The same joined by "or", for "no ... were given": ``"cores or readings"``.
    invasive
        How anomalies are verified, for the cautions.
    whole_boards
        Whether a whole-board take-off belongs to this kind of survey.
    other_causes
        Other causes of a warm patch that a dry confirmation points to.
    sample_both
        The advice when the confirmations cover only wet or only dry ground.
    invasive_short
        The same as ``invasive``, in a few words.
    edge
        What the repair outline's perimeter is: ``"cut edge"``, ``"scarf edge"``.
    false_warm
        The cautions' sentence on false warm areas and missed wet ones.
    false_readings
        A caution on the confirmations themselves (``""`` when none).
    who_decides
        Who decides what is done, for the cautions.
    next_sample
        The note under the suggested next confirmations.
    safety
        ``(heading, text)`` items of the safety cautions (heading may be ``""``).
    status_note
        Added to the method's status rule (``""`` for roofs).
    decides
        Who decides, in a few words (a drawing's title block).
    verify_by
        How to verify, after "verify by": ``"coring"``, ``"meter readings, sounding ..."``.
    confirmation_label
        The heading of a confirmation's id in the map: ``"Core / reading"``, ``"Reading / sounding"``.
    """

    kind: str
    area: str
    area_short: str
    kind_words: str
    surface: str
    wet_material: str
    confirmation: str
    confirmations: str
    confirmations_all: str
    confirmations_any: str
    invasive: str
    whole_boards: bool
    other_causes: str
    sample_both: str
    invasive_short: str
    edge: str
    false_warm: str
    false_readings: str
    who_decides: str
    next_sample: str
    safety: tuple[tuple[str, str], ...]
    confirmation_label: str
    verify_by: str
    decides: str
    status_note: str

    @property
    def area_title(self) -> str:
        """``area`` with a capital first letter (a table heading)."""
        return self.area[:1].upper() + self.area[1:]

    @property
    def confirmations_title(self) -> str:
        """``confirmations_all`` with a capital first letter (a section heading)."""
        return self.confirmations_all[:1].upper() + self.confirmations_all[1:]

    @property
    def wet_words(self) -> str:
        """What a confirmed anomaly is: ``"wet insulation"``, ``"wet core"``."""
        return f"wet {self.wet_material}"


#: A roof survey's words.
ROOF = Wording(
    kind="roof", area="roof", area_short="roof", kind_words="low-slope roof", surface="membrane",
    wet_material="insulation", confirmation="core", confirmations="cores", confirmations_all="cores and readings",
    confirmations_any="cores or readings",
    invasive="cores, or cores plus probe or meter readings", whole_boards=True,
    other_causes="extra plies, heat from below, ...",
    sample_both="core both suspect-wet and dry areas (common practice)",
    invasive_short="cores", edge="cut edge", confirmation_label="Core / reading",
    verify_by="coring", decides="local codes and licensed professionals decide",
    status_note="",
    false_warm=(
        "False warm areas come from extra plies and old patches, heavy flood coats, gravel or ballast piles, "
        "heat from below (exhausts, warm rooms, drain pans), structure and metal flashing, ponding and debris, "
        "and reflections of sky or cloud on shiny surfaces. Wet areas can be missed under dew or frost, when "
        "cloud arrives during the survey, with deep moisture, with closed-cell boards (faint patterns at the "
        "joints) and on ballasted, paver, inverted or green roofs."),
    false_readings="",
    who_decides=(
        "Local building codes, work-safety rules and licensed roofers, engineers or accredited marine "
        "surveyors decide what is done; rules on replacing rather than repairing (for example above a share "
        "of wet area) differ by jurisdiction."),
    next_sample="Check for asbestos and services before coring; seal every core hole the same day.",
    safety=(
        ("Roofs at night.", "Walk the roof in daylight first and note edges, openings, skylights and soft "
         "spots. Never work alone on a roof. Use fall protection near unprotected edges (guardrails, travel "
         "restraint or arrest systems, as your local rules require) and cover or guard skylights and openings. "
         "The camera screen spoils night vision: stop and let your eyes adapt before moving."),
        ("Before coring.", "Old roofing may contain asbestos: have it checked before cutting. Seal every "
         "core hole the same day."),
        ("Boatyards.", "Tie ladders and keep three points of contact, never touch or move jack stands, "
         "stay out of lift and travel-hoist zones, and protect yourself against antifouling and fibreglass dust."),
        ("", "Follow local codes and work-safety rules, and defer to licensed roofers, engineers or accredited "
         "marine surveyors."),
    ),
)

_HULL = Wording(
    kind="hull", area="hull side", area_short="hull side", kind_words="hull side", surface="laminate",
    wet_material="core", confirmation="reading", confirmations="readings", confirmations_all="readings and soundings",
    confirmations_any="readings or soundings",
    invasive="moisture-meter readings and percussion sounding, then a hole-saw sample of the core where they "
             "disagree", whole_boards=False,
    other_causes="a bulkhead, tank, backing plate or thicker laminate behind the skin, ...",
    sample_both="take readings on both suspect-wet and dry areas (common practice)",
    invasive_short="meter readings, sounding and hole-saw samples", edge="scarf edge",
    confirmation_label="Reading / sounding",
    verify_by="meter readings, sounding and hole-saw samples", decides="an accredited marine surveyor decides",
    status_note=" (a dull sounding says wet; a solid sounding alone neither refutes nor confirms)",
    false_warm=(
        "False warm areas come from bulkheads, stringers, tanks and engine heat behind the skin, thicker "
        "laminate and old repairs, backing plates and fittings, and reflections of sky or the surroundings on "
        "glossy gelcoat. Wet core can be missed where the hull was not warmed evenly, under dew, deep behind "
        "a thick laminate, and where the skin was shaded during the cool-down."),
    false_readings=(
        "Moisture-meter readings are relative, not moisture content; antifouling paint, salt, tanks, backing "
        "plates and condensation give false high readings, and a high reading may mean a wet outer skin rather "
        "than a wet core. A percussion sounding finds voids and debonded skin, not water: a dull note is "
        "counted as wet, but a solid note does not prove the core dry."),
    who_decides=(
        "Accredited marine surveyors, the builder's repair guidance, class or flag rules where they apply and "
        "work-safety rules decide what is done; whether to re-core a patch or a whole panel is their call."),
    next_sample=("Take a meter reading and sound the skin there first; drill a hole-saw sample only where they "
                 "disagree, and seal every hole the same day."),
    safety=(
        ("Boatyards.", "Tie ladders and keep three points of contact, never touch or move jack stands or "
         "cradles, stay out of lift and travel-hoist zones, and protect yourself against antifouling and "
         "fibreglass dust (mask, gloves, eye protection) when sounding, drilling or grinding."),
        ("At dusk.", "The camera screen spoils night vision: stop and let your eyes adapt before moving "
         "around the stands and the ladder."),
        ("", "Follow the yard's rules and local work-safety rules, and defer to accredited marine surveyors."),
    ),
)


def wording_for(kind: str, *, side: str | None = None) -> Wording:
    """The vocabulary of a survey of ``kind`` (``"roof"`` or ``"hull"``), with the hull's ``side``."""
    if kind != "hull":
        return ROOF
    if not side:
        return _HULL
    return Wording(**{**_HULL.__dict__, "area": f"{side} hull side", "kind_words": f"hull side, {side}"})


def wording_of(survey) -> Wording:
    """The vocabulary of a loaded :class:`wetmap.survey.Survey` (its ``[survey] kind`` and ``side``)."""
    info = survey.survey
    return wording_for(info.kind, side=info.side)
