"""Steel properties for the load-core estimate, and matching a profile's material text to a class.

Three classes are enough for a heating-time estimate: the spread inside a class (a few per cent
in density and specific heat) is far smaller than the uncertainty of the oven's emissivity and
convection, which the estimate covers with its own margin (see tuikiln.coremodel).

Values are means over roughly 20-900 °C, from memory of Incropera & DeWitt, *Fundamentals of
Heat and Mass Transfer*, Table A.1 (plain carbon steel, AISI 1010, chromium/molybdenum steels,
AISI 304/410), and of the specific-heat curve for carbon steel in EN 1993-1-2 (Eurocode 3,
fire part), whose magnetic-transformation peak near 735 °C raises the mean well above the
room-temperature 434-480 J/(kg·K). Specific heat is rounded up and conductivity down, because
both errors make the estimate slower, which is the safe side for a soak clock. Not for design.
"""

from __future__ import annotations

import re
from dataclasses import dataclass


@dataclass(frozen=True)
class Steel:
    name: str
    density_kg_m3: float
    specific_heat_j_kgk: float
    conductivity_w_mk: float
    source: str

    @property
    def diffusivity_m2_s(self) -> float:
        return self.conductivity_w_mk / (self.density_kg_m3 * self.specific_heat_j_kgk)


_SOURCE = "means over 20-900 °C, from memory of Incropera Table A.1 and EN 1993-1-2"

STEELS: dict[str, Steel] = {
    "carbon steel": Steel("carbon steel", 7850.0, 650.0, 38.0, _SOURCE),
    "tool steel": Steel("low-alloy / tool steel", 7800.0, 600.0, 28.0, _SOURCE),
    "stainless": Steel("stainless steel", 7900.0, 570.0, 20.0, _SOURCE),
}
DEFAULT_CLASS = "tool steel"
"""Used when the material is unknown: its low conductivity and mid heat capacity are the
slower choice for the sizes people heat-treat in small ovens."""

# Patterns on the normalised text (upper case, spaces and dashes removed). Order matters:
# stainless grades first (440C would otherwise look like a number), then tool steels, then
# plain carbon. Grades are the common AISI/SAE, W.-Nr. and trade designations.
_STAINLESS = re.compile(
    r"STAINLESS|INOX|^(AISI|SAE|UNS)?(30[1-49]|31[0-7]|32[01]|347|40[3-9]|41[0-8]|42[0-9]|"
    r"43[0-9]|44[0-9]|17[47]PH|15\d?PH)[A-Z]?L?$|^(AISI|SAE)?440[ABCF]?|AEBL|14C28|12C27|"
    r"N690|VG10|154CM|CPMS\d+V|^S\d+VN?$|M390|X\d+CR(NI)?1[3-8]|1\.4\d{3}|CPM154|CTS|LC200|ELMAX|RWL34|"
    r"BD1|AUS\d+|8CR|9CR|LIONSTEEL|NITROB|VANAX|MAGNACUT"
)
_TOOL = re.compile(
    r"TOOL|HSS|HIGHSPEED|^(AISI)?[ADHLMOSTWPF]\d{1,2}[A-Z]?$|^(AISI)?(O[1267]|D[2-7]|A[2-9]|"
    r"S[1-7]|H1[1-3]|M[2-4]|T1|W[12]|L6|52100|41[34]0|43[34]0|51[0-9]{2}|86[0-9]{2}|"
    r"61[0-9]{2}|92[0-9]{2}|80CRV2|1\.2\d{3}|CPM\d+V|3V|10V|15N20|SKD|SKS|SK\d|SUJ|ASP\d+|"
    r"PM|VANADIS|SLEIPNER|K\d{3}|ALLOY|CRMO|CRV|NICR)|80CRV2|52100|15N20|SLEIPNER|VANADIS"
)
_CARBON = re.compile(
    r"CARBON|MILD|PLAIN|^(AISI|SAE|UNS|C|CK|G)?10\d{2}[A-Z]?$|^(AISI|SAE)?(10[0-9]{2}|"
    r"11[0-9]{2}|15[0-9]{2})|^C\d{2,3}$|^CK\d{2,3}$|1\.0\d{3}|1\.1\d{3}|W1|SK\d|SHIRAGAMI|"
    r"WHITEPAPER|AOGAMI|SC\d+|^(EN)?(8|9|42)[A-Z]?$"
)


def match_material(text: str | None) -> tuple[str, str]:
    """The steel class for a material text, and plain words saying how it was read.

    >>> match_material("AISI O1")[0]
    'tool steel'
    """
    if text is None or not str(text).strip():
        return DEFAULT_CLASS, f"no material given: estimated as {STEELS[DEFAULT_CLASS].name}"
    raw = str(text).strip()
    key = re.sub(r"[\s\-_/]+", "", raw.upper())
    for name, pattern in (("stainless", _STAINLESS), ("tool steel", _TOOL),
                          ("carbon steel", _CARBON)):
        if pattern.search(key):
            return name, f'"{raw}" read as {STEELS[name].name}'
    return DEFAULT_CLASS, (f'"{raw}" not recognised: estimated as {STEELS[DEFAULT_CLASS].name}'
                           " (write e.g. \"1084\", \"O1\" or \"440C\")")


def steel_for(text: str | None) -> Steel:
    return STEELS[match_material(text)[0]]
