"""The demo facility's specimens, and how each is coated and imaged on each instrument.

Invented specimens of the kinds the demo needs (metal powders, polymer fibres, a hydrogel, ceramic
fracture surfaces, nanoparticles on carbon film). Settings are typical magnitudes of trade practice
(from memory), chosen so that most sessions look sensible and a few show the classic mistakes
(an uncoated insulator at high voltage, a coating as thick as the features) for the flags to find.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from facility.logbook.models import CoatingMaterial, CoatingMethod, Conductivity, MaterialClass
from facility.logbook.models import SpecimenForm as Form


@dataclass(frozen=True)
class Preset:
    """One set of settings an operator uses for a specimen; values vary within these ranges."""

    label: str
    kv: tuple[float, ...]
    wd_mm: tuple[float, float]
    detector: str
    mag: tuple[float, float]
    dwell_us: tuple[float, ...] = (0.5, 1.0, 3.0)
    current_na: tuple[float, float] | None = None
    spot: tuple[float, ...] = ()
    aperture_um: float | None = None
    tilt: tuple[float, ...] = (0.0,)


@dataclass(frozen=True)
class Recipe:
    """How a specimen is coated and imaged on one instrument (the first coating is the usual one)."""

    coatings: tuple[tuple[str, float, str], ...]
    presets: tuple[Preset, ...]
    vacuum: str = "high"
    pressure_pa: tuple[float, float] | None = None


NO_COAT = (CoatingMaterial.NONE, 0.0, CoatingMethod.NONE)
AUPD_5 = (CoatingMaterial.AU_PD, 5.0, CoatingMethod.SPUTTER)
AU_8 = (CoatingMaterial.AU, 8.0, CoatingMethod.SPUTTER)
PT_3 = (CoatingMaterial.PT, 3.0, CoatingMethod.SPUTTER)
PT_2 = (CoatingMaterial.PT, 2.0, CoatingMethod.SPUTTER)
C_15 = (CoatingMaterial.C, 15.0, CoatingMethod.EVAPORATION)

# Demo detector names, generic on purpose.
SE, INLENS, BSE, LVSE = "SE (chamber)", "SE (in-lens)", "BSE", "low-vacuum SE"


@dataclass(frozen=True)
class SpecimenSpec:
    key: str
    group: str
    name: str  # "{n}" becomes a running number
    material: str
    material_class: str
    conductivity: str
    form: str
    feature_size_nm: float | None
    preparation: str
    tags: tuple[str, ...]
    recipes: dict[str, Recipe] = field(default_factory=dict)
    e2_kev: float | None = None
    beam_sensitive: bool = False


_POWDER_BENCH = Recipe(
    (NO_COAT,),
    (
        Preset("overview", (15.0,), (8.0, 10.0), BSE, (150, 600), spot=(3.0,)),
        Preset("particle shape", (15.0, 10.0), (8.0, 10.0), BSE, (1000, 3000), spot=(3.0,)),
    ),
)
_POWDER_FE = Recipe(
    (NO_COAT,),
    (
        Preset("satellites", (10.0, 15.0), (6.0, 9.0), SE, (2000, 8000), current_na=(0.2, 1.0)),
        Preset(
            "surface oxide", (3.0, 5.0), (3.0, 5.0), INLENS, (20000, 60000), current_na=(0.05, 0.2)
        ),
    ),
)
_FRACTURE_FE = Recipe(
    (AUPD_5, C_15, PT_3),
    (
        Preset(
            "fracture overview", (10.0, 15.0), (8.0, 12.0), SE, (200, 1500), current_na=(0.4, 1.5)
        ),
        Preset(
            "grain facets", (5.0, 10.0), (5.0, 7.0), INLENS, (5000, 30000), current_na=(0.1, 0.4)
        ),
        Preset("EDS map", (15.0, 20.0), (9.5, 10.5), BSE, (500, 3000), (10.0, 20.0), (1.0, 3.0)),
    ),
)
_FRACTURE_VP = Recipe(
    (NO_COAT,),
    (
        Preset(
            "fracture overview",
            (15.0, 20.0),
            (9.0, 11.0),
            BSE,
            (100, 1000),
            spot=(4.0, 5.0),
            aperture_um=50.0,
        ),
        Preset(
            "grain facets",
            (10.0, 15.0),
            (8.0, 10.0),
            LVSE,
            (2000, 10000),
            spot=(3.5, 4.0),
            aperture_um=30.0,
        ),
    ),
    vacuum="low",
    pressure_pa=(30.0, 80.0),
)
_FRACTURE_BENCH = Recipe(
    (AUPD_5, AU_8),
    (Preset("fracture overview", (10.0, 15.0), (8.0, 10.0), BSE, (250, 2500), spot=(3.0,)),),
)
_FIBRE_FE = Recipe(
    (PT_3, AU_8, AUPD_5),
    (
        Preset(
            "mat overview", (2.0, 3.0, 5.0), (6.0, 8.0), SE, (500, 2500), current_na=(0.05, 0.2)
        ),
        Preset(
            "fibre diameter",
            (2.0, 3.0),
            (3.0, 5.0),
            INLENS,
            (5000, 20000),
            (0.1, 0.3, 1.0),
            (0.02, 0.1),
        ),
    ),
)
_FIBRE_UNCOATED_FE = Recipe(
    # Below the polymer's second crossover E2 an uncoated fibre charges only mildly (DOMAIN.md).
    (NO_COAT,),
    (
        Preset("mat overview", (1.0,), (3.0, 4.0), INLENS, (500, 2500), (0.1, 0.3), (0.01, 0.05)),
        Preset(
            "fibre surface", (0.8, 1.0), (2.5, 3.5), INLENS, (8000, 30000), (0.1, 0.3), (0.01, 0.04)
        ),
    ),
)
_FIBRE_VP = Recipe(
    (NO_COAT,),
    (
        Preset(
            "mat overview",
            (10.0, 15.0),
            (8.0, 10.0),
            LVSE,
            (300, 3000),
            spot=(3.5, 4.5),
            aperture_um=30.0,
        ),
    ),
    vacuum="low",
    pressure_pa=(40.0, 90.0),
)
_HYDROGEL_VP = Recipe(
    (NO_COAT,),
    (
        Preset(
            "bead surface",
            (10.0, 15.0),
            (9.0, 12.0),
            LVSE,
            (100, 800),
            spot=(4.0, 5.0),
            aperture_um=50.0,
        ),
        Preset(
            "pore network",
            (15.0, 20.0),
            (8.0, 10.0),
            BSE,
            (1000, 5000),
            spot=(4.5, 5.0),
            aperture_um=50.0,
        ),
    ),
    vacuum="low",
    pressure_pa=(60.0, 130.0),
)
_HYDROGEL_BENCH = Recipe(
    (NO_COAT,),
    (Preset("bead overview", (5.0, 10.0), (8.0, 10.0), BSE, (100, 600), spot=(3.0,)),),
    vacuum="low",
    pressure_pa=(30.0, 60.0),
)
_NP_FE = Recipe(
    (NO_COAT,),
    (
        Preset(
            "particle size",
            (20.0, 30.0),
            (3.0, 4.5),
            INLENS,
            (100000, 300000),
            (1.0, 3.0),
            (0.05, 0.2),
        ),
        Preset(
            "film coverage", (5.0, 10.0), (4.0, 6.0), INLENS, (10000, 40000), current_na=(0.05, 0.2)
        ),
    ),
)
_NP_INSULATING_FE = Recipe(
    (NO_COAT, PT_2),
    (
        Preset(
            "particle size",
            (1.0, 2.0),
            (2.5, 3.5),
            INLENS,
            (50000, 200000),
            (0.1, 0.3),
            (0.01, 0.05),
        ),
        Preset(
            "film coverage", (2.0, 3.0), (3.0, 4.0), INLENS, (5000, 20000), current_na=(0.02, 0.1)
        ),
    ),
)
_NP_VP = Recipe(
    (NO_COAT,),
    (
        Preset(
            "film coverage",
            (20.0, 30.0),
            (6.0, 8.0),
            BSE,
            (5000, 20000),
            spot=(3.0, 3.5),
            aperture_um=30.0,
        ),
    ),
)
_STANDARD_FE = Recipe(
    (NO_COAT,),
    (
        Preset(
            "resolution test", (15.0,), (3.0, 4.0), INLENS, (200000, 400000), (3.0,), (0.05, 0.1)
        ),
        Preset(
            "low-kV resolution test",
            (1.0,),
            (2.0, 3.0),
            INLENS,
            (100000, 200000),
            (3.0,),
            (0.02, 0.05),
        ),
    ),
)
_STANDARD_VP = Recipe(
    (NO_COAT,),
    (
        Preset(
            "resolution test",
            (30.0,),
            (8.0, 10.0),
            SE,
            (50000, 100000),
            (10.0,),
            spot=(3.0,),
            aperture_um=30.0,
        ),
    ),
)

SPECIMENS = [
    SpecimenSpec(
        "resolution-standard",
        "core",
        "Gold-on-carbon resolution standard {n}",
        "gold islands on graphite",
        MaterialClass.METAL,
        Conductivity.CONDUCTING,
        Form.PARTICLES_ON_FILM,
        5.0,
        "Facility reference specimen, kept in the desiccator.",
        ("reference", "alignment"),
        {"fesem-1": _STANDARD_FE, "vpsem-1": _STANDARD_VP},
    ),
    SpecimenSpec(
        "ti-powder",
        "pm",
        "Gas-atomised Ti-6Al-4V powder, batch {n}",
        "Ti-6Al-4V powder",
        MaterialClass.METAL,
        Conductivity.CONDUCTING,
        Form.POWDER,
        2000.0,
        "Dispersed on carbon tape; loose particles blown off with dry nitrogen.",
        ("additive manufacturing", "powder", "titanium alloy"),
        {"benchtop-1": _POWDER_BENCH, "fesem-1": _POWDER_FE},
    ),
    SpecimenSpec(
        "steel-powder",
        "pm",
        "Recycled 316L stainless steel powder, build {n}",
        "316L stainless steel powder",
        MaterialClass.METAL,
        Conductivity.CONDUCTING,
        Form.POWDER,
        1000.0,
        "Sampled from the build chamber after reuse; carbon tape on an aluminium stub.",
        ("powder reuse", "stainless steel"),
        {"benchtop-1": _POWDER_BENCH, "fesem-1": _POWDER_FE},
    ),
    SpecimenSpec(
        "alumina-fracture",
        "pm",
        "Sintered alumina bar {n}, fracture surface",
        "alumina (99.5 %)",
        MaterialClass.CERAMIC,
        Conductivity.INSULATING,
        Form.BULK,
        500.0,
        "Broken in three-point bending; mounted with silver paint to ground the edges.",
        ("fractography", "alumina", "sintering"),
        {"fesem-1": _FRACTURE_FE, "benchtop-1": _FRACTURE_BENCH},
        e2_kev=4.2,  # Joy & Joy, Micron 27 (1996) 247, via DOMAIN.md
    ),
    SpecimenSpec(
        "pcl-fibres",
        "sm",
        "Electrospun PCL fibre mat {n}",
        "polycaprolactone fibres",
        MaterialClass.POLYMER,
        Conductivity.INSULATING,
        Form.FIBRE,
        300.0,
        "5 mm square cut from the collector foil; carbon tape.",
        ("electrospinning", "scaffold", "fibre diameter"),
        {"fesem-1": _FIBRE_FE, "vpsem-1": _FIBRE_VP},
        beam_sensitive=True,
    ),
    SpecimenSpec(
        "nylon-fibres",
        "sm",
        "Nylon-6 nanofibre membrane {n}",
        "nylon-6 nanofibres",
        MaterialClass.POLYMER,
        Conductivity.INSULATING,
        Form.MEMBRANE,
        150.0,
        "Membrane pressed onto carbon tape, edges grounded with carbon paint.",
        ("filtration", "nanofibre"),
        {"fesem-1": _FIBRE_UNCOATED_FE, "vpsem-1": _FIBRE_VP},
        e2_kev=1.18,  # Joy & Joy, Micron 27 (1996) 247, via DOMAIN.md
        beam_sensitive=True,
    ),
    SpecimenSpec(
        "alginate-hydrogel",
        "sm",
        "Calcium alginate hydrogel bead {n}",
        "calcium alginate hydrogel (2 % w/v)",
        MaterialClass.POLYMER,
        Conductivity.INSULATING,
        Form.HYDROGEL,
        5000.0,
        "Blotted hydrated bead on a cooled stage; imaged wet, no coating.",
        ("hydrogel", "wet", "encapsulation"),
        {"vpsem-1": _HYDROGEL_VP, "benchtop-1": _HYDROGEL_BENCH},
        beam_sensitive=True,
    ),
    SpecimenSpec(
        "gold-np",
        "np",
        "Citrate gold nanoparticles on carbon film, batch {n}",
        "gold nanoparticles (citrate-capped)",
        MaterialClass.METAL,
        Conductivity.CONDUCTING,
        Form.PARTICLES_ON_FILM,
        15.0,
        "3 µL drop-cast on a carbon-film copper grid, dried in air.",
        ("nanoparticles", "plasmonics", "size distribution"),
        {"fesem-1": _NP_FE, "vpsem-1": _NP_VP},
    ),
    SpecimenSpec(
        "silica-np",
        "np",
        "Silica nanoparticles on carbon film, batch {n}",
        "amorphous silica nanoparticles",
        MaterialClass.CERAMIC,
        Conductivity.INSULATING,
        Form.PARTICLES_ON_FILM,
        80.0,
        "Ethanol dispersion drop-cast on a carbon film; grid on a grounded holder.",
        ("nanoparticles", "silica", "size distribution"),
        {"fesem-1": _NP_INSULATING_FE, "vpsem-1": _NP_VP},
    ),
    SpecimenSpec(
        "iron-oxide-np",
        "np",
        "Iron oxide nanoparticles on carbon film, batch {n}",
        "iron oxide nanoparticles",
        MaterialClass.CERAMIC,
        Conductivity.SEMICONDUCTING,
        Form.PARTICLES_ON_FILM,
        10.0,
        "Hexane dispersion drop-cast on a carbon film, dried under a lamp.",
        ("nanoparticles", "magnetic"),
        {"fesem-1": _NP_FE},
    ),
    SpecimenSpec(
        "insulator-fracture",
        "client",
        "Failed ceramic insulator {n}, fracture surface",
        "porcelain insulator body",
        MaterialClass.CERAMIC,
        Conductivity.INSULATING,
        Form.BULK,
        1000.0,
        "Fragment from a failed part, cleaned in isopropanol; mounted with carbon paint.",
        ("failure analysis", "porcelain"),
        {"vpsem-1": _FRACTURE_VP, "fesem-1": _FRACTURE_FE},
    ),
    SpecimenSpec(
        "bronze-powder",
        "client",
        "Sintered bronze filter powder, lot {n}",
        "bronze powder (Cu-Sn)",
        MaterialClass.METAL,
        Conductivity.CONDUCTING,
        Form.POWDER,
        5000.0,
        "Loose powder on carbon tape.",
        ("incoming inspection", "powder"),
        {"vpsem-1": Recipe((NO_COAT,), _POWDER_BENCH.presets), "fesem-1": _POWDER_FE},
    ),
]

# Coating programmes run on the sputter coater (a sputter coater cannot lay down carbon).
COATER_PROGRAMMES = (AUPD_5, AU_8, PT_3, PT_2)
