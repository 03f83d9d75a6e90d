"""The specimen's search document stored as a tsvector, on PostgreSQL only.

The finder ranks a few thousand candidate specimens by text relevance per search; computing
``to_tsvector`` for each of them at query time cost more than the rest of the search together.
A generated column is kept by PostgreSQL itself on every insert and update, so the logbook does
not have to know about it; Django never selects it (it lists its columns). The GIN index moves
from the expression (0001) to the column. The trigram index of 0001 goes: the finder now scores
trigram similarity once per distinct material name (``text.name_similarity``), which needs no
index, where the index's recheck on a short word visited tens of thousands of specimens. SQLite
uses the portable fallback and needs none of this.
"""

from __future__ import annotations

from django.db import migrations

from facility.finder.text import DOCUMENT_COLUMN, SPECIMEN_DOCUMENT_SQL

CREATE = f"""
ALTER TABLE logbook_specimen ADD COLUMN IF NOT EXISTS {DOCUMENT_COLUMN} tsvector
    GENERATED ALWAYS AS (to_tsvector('english'::regconfig, {SPECIMEN_DOCUMENT_SQL})) STORED;
CREATE INDEX IF NOT EXISTS finder_specimen_document ON logbook_specimen
    USING gin ({DOCUMENT_COLUMN});
DROP INDEX IF EXISTS finder_specimen_fts;
DROP INDEX IF EXISTS finder_specimen_material_trgm;
"""
DROP = f"""
CREATE INDEX IF NOT EXISTS finder_specimen_material_trgm ON logbook_specimen
    USING gin (material gin_trgm_ops);
CREATE INDEX IF NOT EXISTS finder_specimen_fts ON logbook_specimen
    USING gin (to_tsvector('english', {SPECIMEN_DOCUMENT_SQL}));
DROP INDEX IF EXISTS finder_specimen_document;
ALTER TABLE logbook_specimen DROP COLUMN IF EXISTS {DOCUMENT_COLUMN};
"""


def forwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(CREATE)


def backwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(DROP)


class Migration(migrations.Migration):
    dependencies = [("finder", "0001_search_indexes"), ("logbook", "0004_updated_at")]
    operations = [migrations.RunPython(forwards, backwards)]
