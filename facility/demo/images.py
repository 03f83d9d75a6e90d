"""Demo micrographs: invented images from the project's own generator, sent through the real
upload and analysis pipeline so that a new user sees flags and remedies on first start.

The kind of image follows the session's own settings, as it would at a real microscope: an
uncoated insulator above its E2 in high vacuum charges, a long working distance blurs, and now
and then the stigmators were off.
"""

from __future__ import annotations

import io
from collections import Counter

import tifffile
from django.core.files.uploadedfile import SimpleUploadedFile

from facility.instruments.models import InstrumentKind
from facility.logbook.models import InstrumentSession
from facility.logbook.uploads import upload_micrograph
from facility.micrograph.synth import make_micrograph
from facility.micrograph.synth.charging import ChargingSpec

SHAPE = (512, 768)  # small enough to analyse quickly, big enough to look like a micrograph
SCENES = {
    "powder": "particles",
    "particles_on_film": "particles",
    "fibre": "fibres",
    "membrane": "porous",
    "hydrogel": "porous",
    "bulk": "edges",
    "thin_film": "edges",
}


def _kind(session: InstrumentSession, n: int) -> str:
    codes = set(session.flags.values_list("code", flat=True))
    top_wd = max((c.working_distance_mm or 0 for c in session.conditions.all()), default=0)
    if "charging_risk" in codes:
        return "charging"
    if top_wd > 9:
        return "blurred"
    if n % 5 == 2:
        return "astigmatic"
    return "clean"


def _image(kind: str, scene: str, seed: int):
    spec = None
    sigma, ratio, angle = 1.6, 1.0, 0.0
    if kind == "charging":
        spec = ChargingSpec(kinds=("clipped", "line_jumps", "streaks", "tails"), strength=0.8)
    elif kind == "blurred":
        sigma = 5.5
    elif kind == "astigmatic":
        sigma, ratio, angle = 1.8, 2.6, 35.0
    return make_micrograph(
        seed=seed,
        shape=SHAPE,
        scene=scene,
        sigma_px=sigma,
        astigmatism=ratio,
        angle_deg=angle,
        dose=300,
        bit_depth=16,
        charging=spec,
    ).image


def _text_block(session: InstrumentSession, mismatch: bool) -> str:
    # A plain key/value block, as an acquisition program might write; one demo image in a few
    # disagrees with the log, so the mismatch flag has something to show.
    conditions = session.conditions.order_by("id").first()
    lines = ["[Acquisition]"]
    if conditions and conditions.accelerating_voltage_kv:
        kv = conditions.accelerating_voltage_kv * (3 if mismatch else 1)
        lines.append(f"Acc voltage = {min(kv, 30):g} kV")
    if conditions and conditions.working_distance_mm:
        lines.append(f"WD = {conditions.working_distance_mm:g} mm")
    lines.append("Pixel size = 4.2 nm")
    return "\n".join(lines) + "\n"


def add_images(*, by, sessions: int = 12, per_session: int = 2) -> Counter:
    """Attach generated micrographs to the most recent closed SEM sessions with a specimen."""
    recent = (
        InstrumentSession.objects.filter(
            ended_at__isnull=False,
            specimen__isnull=False,
            instrument__kind__in=[InstrumentKind.SEM, InstrumentKind.ESEM],
        )
        .select_related("specimen")
        .prefetch_related("conditions")
        .order_by("-started_at")[:sessions]
    )
    made: Counter = Counter()
    for n, session in enumerate(recent):
        kind = _kind(session, n)
        scene = SCENES.get(session.specimen.form, "particles")
        for k in range(per_session):
            image = _image(kind, scene, seed=1000 + 10 * session.pk + k)
            buffer = io.BytesIO()
            tifffile.imwrite(
                buffer, image, description=_text_block(session, mismatch=(n == 3 and k == 0))
            )
            name = f"{session.specimen.name[:40]} {k + 1:02d}.tif"
            upload_micrograph(
                session=session, by=by, upload=SimpleUploadedFile(name, buffer.getvalue())
            )
            made[kind] += 1
    return made
