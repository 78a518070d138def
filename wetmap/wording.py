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
    invasive
        How anomalies are verified, for the cautions.
    whole_boards
        Whether a whole-board take-off belongs to this kind of survey.
    other_causes
        Other causes of a warm patch that a dry confirmation points to.
    sample_both
        The advice when the confirmations cover only wet or only dry ground.
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
    invasive: str
    whole_boards: bool
    other_causes: str
    sample_both: str

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
    invasive="cores, or cores plus probe or meter readings", whole_boards=True,
    other_causes="extra plies, heat from below, ...",
    sample_both="core both suspect-wet and dry areas (common practice)",
)

_HULL = Wording(
    kind="hull", area="hull side", area_short="hull side", kind_words="hull side", surface="laminate",
    wet_material="core", confirmation="reading", confirmations="readings", confirmations_all="readings and soundings",
    invasive="moisture-meter readings and percussion sounding, then a hole-saw sample of the core where they "
             "disagree", whole_boards=False,
    other_causes="a bulkhead, tank, backing plate or thicker laminate behind the skin, ...",
    sample_both="take readings on both suspect-wet and dry areas (common practice)",
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
