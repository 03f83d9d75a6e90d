"""Write one session's logbook entry through the logbook services: specimen, coating, conditions.

What goes in follows the specimen's recipe for the instrument (specimens.py), varied within its
ranges by the slot's own random generator.
"""

from __future__ import annotations

import datetime as dt
import math
import random

from facility.bookings.models import Purpose
from facility.demo import specimens as sp
from facility.demo.plan import Slot
from facility.logbook import services as logbook
from facility.logbook.models import (
    CoatingMaterial,
    CoatingMethod,
    Conductivity,
    InstrumentSession,
    Specimen,
)

FAULTS = (
    "Stage drifted for about 15 minutes after the vent; it settled by itself.",
    "Chamber took 25 minutes to pump down after the specimen exchange.",
    "Image jumped twice at high magnification; reported to staff.",
    "Specimen holder screw was loose; tightened before imaging.",
)
CHARGING_NOTE = "Tried it uncoated first: bright streaks and drift at this voltage. Coat next time."
HIDDEN_NOTE = "Coated with the 10 nm programme by mistake; the smallest particles look blurred."
SERVICE_NOTE = (
    "Monthly alignment: gun, apertures and stigmators; resolution checked on the standard."
)


def _significant(value: float, digits: int = 2) -> float:
    return round(value, digits - 1 - int(math.floor(math.log10(abs(value)))))


def _coatable(spec: sp.SpecimenSpec) -> bool:
    return any(c[0] != CoatingMaterial.NONE for r in spec.recipes.values() for c in r.coatings)


class EntryWriter:
    """Keeps each group's specimens, so later sessions come back to the same ones."""

    def __init__(self, group_keys: dict[int, str]) -> None:
        self.group_keys = group_keys  # group pk -> catalogue key
        self.specimens: dict[tuple[str, str], list[Specimen]] = {}

    def write(self, slot: Slot, session: InstrumentSession, by, *, coater: bool) -> None:
        """Log the specimen, its coating and (on a microscope) one to three sets of conditions."""
        rng = slot.rng
        group = self.group_keys[session.account.group_id]
        templates = [
            s
            for s in sp.SPECIMENS
            if s.group == group and (_coatable(s) if coater else slot.instrument in s.recipes)
        ]
        if not templates:
            raise RuntimeError(
                f"demo catalogue: group {group} has no specimen for {slot.instrument}"
            )
        spec = rng.choice(templates)
        self._specimen(session, by, spec, rng)
        if coater:
            self._coater_run(session, by, spec, rng)
            return
        recipe = spec.recipes[slot.instrument]
        notes: list[str] = []
        coating = recipe.coatings[0] if rng.random() < 0.7 else rng.choice(recipe.coatings)
        if (
            spec.conductivity == Conductivity.INSULATING
            and coating[0] != CoatingMaterial.NONE
            and recipe.vacuum == "high"
            and rng.random() < 0.1
        ):
            coating = sp.NO_COAT  # the uncoated trial that charged: material for the flags
            notes.append(CHARGING_NOTE)
        elif spec.feature_size_nm and spec.feature_size_nm < 20 and rng.random() < 0.08:
            coating = (CoatingMaterial.AU_PD, 10.0, CoatingMethod.SPUTTER)
            notes.append(HIDDEN_NOTE)
        material, thickness, method = coating
        coated_at = session.started_at - dt.timedelta(minutes=rng.randint(20, 24 * 60))
        logbook.set_coating(
            session=session,
            by=by,
            material=material,
            thickness_nm=thickness,
            method=method,
            applied_at=None if material == CoatingMaterial.NONE else coated_at,
        )
        count = min(len(recipe.presets), rng.choice((1, 2, 2)))
        for preset in rng.sample(recipe.presets, count):
            self._conditions(session, by, preset, recipe, rng)
        if slot.purpose == Purpose.SERVICE:
            notes.append(SERVICE_NOTE)
        fault = rng.choice(FAULTS) if rng.random() < 0.04 else None
        if notes or fault or recipe.vacuum != "high":
            logbook.update_session(
                session=session,
                by=by,
                vacuum_mode=recipe.vacuum if recipe.vacuum != "high" else None,
                notes=" ".join(notes) or None,
                fault_report=fault,
            )

    def _coater_run(self, session, by, spec: sp.SpecimenSpec, rng: random.Random) -> None:
        options = [
            c for r in spec.recipes.values() for c in r.coatings if c[2] == CoatingMethod.SPUTTER
        ] or list(sp.COATER_PROGRAMMES)
        material, thickness, method = rng.choice(options)
        logbook.set_coating(
            session=session,
            by=by,
            material=material,
            thickness_nm=thickness,
            method=method,
            applied_at=session.started_at + dt.timedelta(minutes=5),
        )

    def _specimen(self, session, by, spec: sp.SpecimenSpec, rng: random.Random) -> Specimen:
        known = self.specimens.setdefault((spec.group, spec.key), [])
        if known and rng.random() < 0.7:
            return logbook.record_specimen(session=session, by=by, specimen=rng.choice(known[-4:]))
        specimen = logbook.record_specimen(
            session=session,
            by=by,
            name=spec.name.format(n=len(known) + 1),
            material=spec.material,
            material_class=spec.material_class,
            conductivity=spec.conductivity,
            form=spec.form,
            feature_size_nm=spec.feature_size_nm,
            e2_kev=spec.e2_kev,
            beam_sensitive=spec.beam_sensitive,
            preparation=spec.preparation,
            tags=list(spec.tags),
        )
        known.append(specimen)
        return specimen

    def _conditions(
        self, session, by, preset: sp.Preset, recipe: sp.Recipe, rng: random.Random
    ) -> None:
        def log_uniform(low: float, high: float) -> float:
            return _significant(math.exp(rng.uniform(math.log(low), math.log(high))))

        values: dict[str, object] = {
            "label": preset.label,
            "accelerating_voltage_kv": rng.choice(preset.kv),
            "working_distance_mm": round(rng.uniform(*preset.wd_mm), 1),
            "detector": preset.detector,
            "dwell_time_us": rng.choice(preset.dwell_us),
            "magnification": log_uniform(*preset.mag),
            "vacuum_mode": recipe.vacuum,
            "tilt_deg": rng.choice(preset.tilt),
        }
        if preset.current_na:
            values["probe_current_na"] = log_uniform(*preset.current_na)
        if preset.spot:
            values["spot_size"] = rng.choice(preset.spot)
        if preset.aperture_um:
            values["aperture_um"] = preset.aperture_um
        if recipe.pressure_pa:
            values["chamber_pressure_pa"] = float(round(rng.uniform(*recipe.pressure_pa)))
        logbook.add_conditions(session=session, by=by, **values)
