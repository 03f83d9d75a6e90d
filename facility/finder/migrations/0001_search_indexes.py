"""Text-search indexes for the finder, on PostgreSQL only.

A GIN index over the same expression the finder searches (so `@@` can use it) and a trigram index
on the material name, for misspelt names. SQLite uses the portable fallback and needs neither.
"""

from __future__ import annotations

from django.contrib.postgres.operations import TrigramExtension
from django.db import migrations

from facility.finder.text import SPECIMEN_DOCUMENT_SQL

CREATE = f"""
CREATE INDEX IF NOT EXISTS finder_specimen_fts ON logbook_specimen
    USING gin (to_tsvector('english', {SPECIMEN_DOCUMENT_SQL}));
CREATE INDEX IF NOT EXISTS finder_specimen_material_trgm ON logbook_specimen
    USING gin (material gin_trgm_ops);
"""
DROP = """
DROP INDEX IF EXISTS finder_specimen_fts;
DROP INDEX IF EXISTS finder_specimen_material_trgm;
"""


def forwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(CREATE)


def backwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(DROP)


class Migration(migrations.Migration):
    dependencies = [("logbook", "0002_analysis_attempts")]
    operations = [TrigramExtension(), migrations.RunPython(forwards, backwards)]
