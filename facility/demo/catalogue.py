"""The invented demo facility: its people, groups, accounts, instruments and training records.

Everything here is made up — the university, its people, groups, client, instruments and accounts.
Instrument figures are plausible magnitudes for a scanning-electron-microscopy core (DOMAIN.md and
trade practice, from memory); they are demo values, not specifications of any real instrument.
Dates are given in days relative to the day the demo is loaded, so the demo always looks current.
The specimens and how they are imaged are in specimens.py.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

from facility.bookings.models import Purpose
from facility.instruments.models import EmitterType, InstrumentKind, PumpKind, TrainingLevel
from facility.people.models import AccountKind, RateCategory, Role

FACILITY = "Marrowick University Electron Microscopy Core"
BUILDING = "Marrowick University, Halden Building"
# .example is reserved for documentation (RFC 2606): no demo address can reach a real mailbox.
EMAIL_DOMAIN = "marrowick.example"
DEMO_PASSWORD = "beamledger-demo"
SEED = "beamledger-demo-1"
HISTORY_DAYS = 91  # about three months of past bookings, ending today
FUTURE_DAYS = 14  # the window a few future bookings fall in


# --- People ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class GroupSpec:
    key: str
    name: str
    shares_details: bool = True


GROUPS = [
    GroupSpec("core", "Electron Microscopy Core (facility staff)"),
    GroupSpec("pm", "Powder Metallurgy Lab"),
    GroupSpec("sm", "Soft Matter and Biomaterials Group"),
    GroupSpec("np", "Nanoparticle Synthesis Group"),
    # A commercial client: its session details stay private to it (finder issue).
    GroupSpec("client", "Tarnwick Components Ltd (client)", shares_details=False),
]


@dataclass(frozen=True)
class UserSpec:
    username: str
    first_name: str
    last_name: str
    title: str  # what the person does, for --list-logins
    group: str | None
    role: str = Role.RESEARCHER
    rate: str = RateCategory.INTERNAL
    staff: bool = False
    leads: bool = False
    activity: float = 1.0  # relative share of bookings


USERS = [
    UserSpec(
        "rowan.keele",
        "Rowan",
        "Keele",
        "facility manager (staff, admin)",
        "core",
        role=Role.MANAGER,
        staff=True,
    ),
    UserSpec("maren.oakhurst", "Maren", "Oakhurst", "group leader", "pm", leads=True, activity=0.3),
    UserSpec("idris.vale", "Idris", "Vale", "researcher (out-of-hours user)", "pm"),
    UserSpec("sunniva.brack", "Sunniva", "Brack", "PhD student (new user)", "pm"),
    UserSpec("juno.pellam", "Juno", "Pellam", "group leader and researcher", "sm", leads=True),
    UserSpec("teodor.rusk", "Teodor", "Rusk", "researcher", "sm"),
    UserSpec(
        "ayla.fenwright", "Ayla", "Fenwright", "group leader and researcher", "np", leads=True
    ),
    UserSpec("casimir.dunmore", "Casimir", "Dunmore", "researcher", "np"),
    UserSpec(
        "noor.ashdale",
        "Noor",
        "Ashdale",
        "commercial client",
        "client",
        rate=RateCategory.COMMERCIAL,
        activity=0.6,
    ),
    UserSpec("pim.dresner", "Pim", "Dresner", "finance officer", None, role=Role.FINANCE),
]
STAFF = "rowan.keele"


@dataclass(frozen=True)
class AccountSpec:
    code: str
    name: str
    kind: str
    group: str
    from_day: int  # relative to the load day
    to_day: int | None  # None: open-ended


ACCOUNTS = [
    AccountSpec("CC-EMC-0100", "Core running costs", AccountKind.COST_CENTRE, "core", -1500, None),
    AccountSpec("CC-PML-2210", "Powder lab consumables", AccountKind.COST_CENTRE, "pm", -900, None),
    # Ended a month ago: bookings before then may use it, later ones may not.
    AccountSpec("GR-PML-0417", "Sintering kinetics grant", AccountKind.GRANT, "pm", -700, -30),
    AccountSpec(
        "CC-SMB-3380", "Soft matter core budget", AccountKind.COST_CENTRE, "sm", -1200, None
    ),
    AccountSpec("GR-SMB-0932", "Fibre scaffolds grant", AccountKind.GRANT, "sm", -200, 500),
    AccountSpec(
        "CC-NPS-4105", "Nanoparticle lab budget", AccountKind.COST_CENTRE, "np", -800, None
    ),
    # Started inside the demo window.
    AccountSpec("GR-NPS-1188", "Plasmonic sensors grant", AccountKind.GRANT, "np", -60, 700),
    AccountSpec(
        "PO-TWK-0007", "Failure analysis, order 7", AccountKind.PURCHASE_ORDER, "client", -400, -121
    ),
    AccountSpec(
        "PO-TWK-0012", "Failure analysis, order 12", AccountKind.PURCHASE_ORDER, "client", -120, 60
    ),
]


# --- Instruments ----------------------------------------------------------------------------


@dataclass(frozen=True)
class PumpSpec:
    name: str
    kind: str
    runs_continuously: bool
    installed_day: int


@dataclass(frozen=True)
class InstrumentSpec:
    code: str
    name: str
    kind: str
    emitter_type: str
    room: str
    vacuum_modes: list[str]
    expected_resolution_nm: dict[str, float]
    magnification_reference_width_mm: float | None
    bookable_from: dt.time
    bookable_until: dt.time
    allows_out_of_hours: bool
    max_booking_minutes: int
    cancellation_deadline_hours: int
    pumps: list[PumpSpec]
    # How busy the demo makes it: booking lengths (min), chance a free start is taken, gaps (min).
    durations: tuple[int, ...]
    take: float
    gaps: tuple[int, ...]
    evening: float = 0.0  # chance of an out-of-hours evening slot on a weekday
    saturday: float = 0.0  # chance of an out-of-hours Saturday slot
    walk_up: float = 0.0  # chance an untaken start becomes a walk-up session
    monthly_service: bool = False
    service_weekday: int = 1  # ISO weekday of the monthly service (first such day of the month)


INSTRUMENTS = [
    InstrumentSpec(
        code="fesem-1",
        name="Field-emission SEM (Schottky)",
        kind=InstrumentKind.SEM,
        emitter_type=EmitterType.SCHOTTKY,
        room="room C0.12",
        vacuum_modes=["high"],
        # Demo values of the magnitude an acceptance sheet gives for a Schottky column (memory).
        expected_resolution_nm={"1": 1.6, "15": 0.8},
        magnification_reference_width_mm=127.0,
        bookable_from=dt.time(8, 0),
        bookable_until=dt.time(18, 0),
        allows_out_of_hours=True,
        max_booking_minutes=240,
        cancellation_deadline_hours=24,
        pumps=[
            PumpSpec("column ion getter pump", PumpKind.ION_GETTER, True, -1400),
            PumpSpec("chamber turbo pump", PumpKind.TURBO, True, -1400),
            PumpSpec("backing scroll pump", PumpKind.SCROLL, True, -380),
        ],
        durations=(120, 180, 240),
        take=0.6,
        gaps=(0, 30, 60),
        evening=0.15,
        saturday=0.25,
        monthly_service=True,
    ),
    InstrumentSpec(
        code="benchtop-1",
        name="Benchtop SEM (tungsten)",
        kind=InstrumentKind.SEM,
        emitter_type=EmitterType.TUNGSTEN,
        room="room C0.08 (teaching lab)",
        vacuum_modes=["high", "low"],
        expected_resolution_nm={"5": 25.0, "15": 15.0},
        magnification_reference_width_mm=100.0,
        bookable_from=dt.time(8, 0),
        bookable_until=dt.time(19, 0),
        allows_out_of_hours=False,
        max_booking_minutes=180,
        cancellation_deadline_hours=2,
        pumps=[
            PumpSpec("turbo pump", PumpKind.TURBO, False, -600),
            PumpSpec("backing rotary pump", PumpKind.ROTARY, False, -600),
        ],
        durations=(60, 90, 120),
        take=0.25,
        gaps=(0, 30, 60, 90),
        walk_up=0.08,
    ),
    InstrumentSpec(
        code="vpsem-1",
        name="Variable-pressure SEM",
        kind=InstrumentKind.ESEM,
        emitter_type=EmitterType.LAB6,
        room="room C0.14",
        vacuum_modes=["high", "low"],
        expected_resolution_nm={"3": 8.0, "30": 3.0},
        magnification_reference_width_mm=127.0,
        bookable_from=dt.time(8, 0),
        bookable_until=dt.time(18, 0),
        allows_out_of_hours=True,
        max_booking_minutes=360,
        cancellation_deadline_hours=48,
        pumps=[
            PumpSpec("gun ion getter pump", PumpKind.ION_GETTER, True, -2000),
            PumpSpec("chamber turbo pump", PumpKind.TURBO, False, -2000),
            PumpSpec("rotary pump", PumpKind.ROTARY, False, -250),
        ],
        durations=(120, 180, 240, 300),
        take=0.45,
        gaps=(0, 60),
        evening=0.05,
        monthly_service=True,
        service_weekday=2,  # not Monday: the one staff member services the FE-SEM then
    ),
    InstrumentSpec(
        code="coater-1",
        name="Sputter coater",
        kind=InstrumentKind.COATER,
        emitter_type=EmitterType.NONE,
        room="room C0.10 (preparation)",
        vacuum_modes=[],
        expected_resolution_nm={},
        magnification_reference_width_mm=None,
        bookable_from=dt.time(8, 0),
        bookable_until=dt.time(18, 0),
        allows_out_of_hours=False,
        max_booking_minutes=60,
        cancellation_deadline_hours=1,
        pumps=[PumpSpec("rotary pump", PumpKind.ROTARY, False, -900)],
        durations=(30,),
        take=0.12,
        gaps=(30, 60, 120),
    ),
]


@dataclass(frozen=True)
class TrainingSpec:
    username: str
    instrument: str
    level: int
    granted_day: int
    expires_day: int | None = None


SUP, IND, OOH = TrainingLevel.SUPERVISED, TrainingLevel.INDEPENDENT, TrainingLevel.OUT_OF_HOURS
TRAINING = [
    TrainingSpec("maren.oakhurst", "fesem-1", IND, -1300, 60),
    TrainingSpec("maren.oakhurst", "benchtop-1", IND, -1300),
    TrainingSpec("idris.vale", "fesem-1", OOH, -500, 230),
    TrainingSpec("idris.vale", "benchtop-1", IND, -600),
    TrainingSpec("idris.vale", "coater-1", IND, -600),
    # Trained under supervision during the demo window: no bookings before that day.
    TrainingSpec("sunniva.brack", "fesem-1", SUP, -50, 300),
    TrainingSpec("sunniva.brack", "benchtop-1", IND, -85),
    TrainingSpec("sunniva.brack", "coater-1", IND, -85),
    TrainingSpec("juno.pellam", "vpsem-1", OOH, -900),
    TrainingSpec("juno.pellam", "benchtop-1", IND, -900),
    TrainingSpec("juno.pellam", "coater-1", IND, -900),
    TrainingSpec("teodor.rusk", "fesem-1", IND, -400, 330),
    TrainingSpec("teodor.rusk", "vpsem-1", IND, -400),
    TrainingSpec("teodor.rusk", "coater-1", IND, -400),
    # Expired a month ago: the benchtop refuses him since.
    TrainingSpec("teodor.rusk", "benchtop-1", IND, -760, -30),
    TrainingSpec("ayla.fenwright", "fesem-1", OOH, -700),
    TrainingSpec("ayla.fenwright", "vpsem-1", IND, -700),
    TrainingSpec("ayla.fenwright", "coater-1", IND, -700),
    TrainingSpec("casimir.dunmore", "fesem-1", IND, -300, 400),
    TrainingSpec("casimir.dunmore", "vpsem-1", SUP, -120, 240),
    TrainingSpec("casimir.dunmore", "coater-1", IND, -300),
    TrainingSpec("noor.ashdale", "vpsem-1", SUP, -380, 350),
    TrainingSpec("noor.ashdale", "fesem-1", SUP, -200, 160),
]


# What an assisted or training booking is for, shown in the booking note.
NOTES = {
    Purpose.ASSISTED: ("Assisted session", "Staff help with low-kV imaging", "EDS with staff"),
    Purpose.TRAINING: ("Training: first independent run", "Training: venting and exchange"),
    Purpose.SERVICE: ("Monthly alignment and resolution check",),
}
