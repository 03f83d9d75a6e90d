"""On PostgreSQL, refuse overlapping live bookings of one instrument in the database itself.

Django has no portable form of an exclusion constraint, so this is raw SQL that runs only on
PostgreSQL; on SQLite the booking service checks for overlaps inside an IMMEDIATE transaction.
Half-open ranges '[)' let one booking end exactly when the next starts.
"""

from __future__ import annotations

from django.db import migrations

LIVE = "('requested', 'confirmed', 'done')"

CREATE = f"""
CREATE EXTENSION IF NOT EXISTS btree_gist;
ALTER TABLE bookings_booking ADD CONSTRAINT booking_no_overlap EXCLUDE USING gist (
    instrument_id WITH =,
    tstzrange(starts_at, ends_at, '[)') WITH &&
) WHERE (state IN {LIVE});
ALTER TABLE bookings_booking ADD CONSTRAINT booking_range_not_empty
    CHECK (NOT isempty(tstzrange(starts_at, ends_at, '[)')));
"""

DROP = """
ALTER TABLE bookings_booking DROP CONSTRAINT IF EXISTS booking_no_overlap;
ALTER TABLE bookings_booking DROP CONSTRAINT IF EXISTS booking_range_not_empty;
"""


def forwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(CREATE)


def backwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(DROP)


class Migration(migrations.Migration):
    dependencies = [("bookings", "0001_initial")]
    operations = [migrations.RunPython(forwards, backwards)]
