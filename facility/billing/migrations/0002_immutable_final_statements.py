"""On PostgreSQL: freeze final statements and their lines, and keep tariff versions apart.

Django has no portable form of either rule, so this is raw SQL that runs only on PostgreSQL
(as bookings/0002 does); on every database the billing services refuse the same changes.

- A row trigger refuses UPDATE and DELETE of a statement whose state is already 'final'
  (finalising itself is an UPDATE of a draft, so it passes).
- A row trigger refuses INSERT, UPDATE and DELETE of a line that is, or would be, on a final
  statement. It reads the statement row FOR SHARE, so a line written while another transaction
  finalises that statement waits for it and then sees 'final'.
- TRUNCATE is not a row operation and is not refused: it is an administrator's act (the test
  suite's flush uses it). Production roles should not be granted TRUNCATE on billing tables.
- An exclusion constraint refuses overlapping validity of two versions of one tariff.

Refusals raise SQLSTATE 23001 (restrict_violation), which Django reports as IntegrityError.
"""

from __future__ import annotations

from django.db import migrations

CREATE = """
CREATE OR REPLACE FUNCTION billing_refuse_final_statement_change() RETURNS trigger AS $$
BEGIN
    IF OLD.state = 'final' THEN
        RAISE EXCEPTION 'statement % (S-%) is final and cannot be changed', OLD.id, OLD.number
            USING ERRCODE = 'restrict_violation',
                  HINT = 'Put a correction on a later statement as an adjustment line.';
    END IF;
    IF TG_OP = 'DELETE' THEN
        RETURN OLD;
    END IF;
    RETURN NEW;
END;
$$ LANGUAGE plpgsql;

CREATE TRIGGER billing_statement_final_immutable
    BEFORE UPDATE OR DELETE ON billing_statement
    FOR EACH ROW EXECUTE FUNCTION billing_refuse_final_statement_change();

CREATE OR REPLACE FUNCTION billing_refuse_final_line_change() RETURNS trigger AS $$
DECLARE
    current_state text;
BEGIN
    IF TG_OP IN ('UPDATE', 'DELETE') THEN
        SELECT state INTO current_state FROM billing_statement WHERE id = OLD.statement_id FOR SHARE;
        IF current_state = 'final' THEN
            RAISE EXCEPTION 'line % is on final statement % and cannot be changed',
                OLD.id, OLD.statement_id USING ERRCODE = 'restrict_violation';
        END IF;
    END IF;
    IF TG_OP IN ('INSERT', 'UPDATE') THEN
        SELECT state INTO current_state FROM billing_statement WHERE id = NEW.statement_id FOR SHARE;
        IF current_state = 'final' THEN
            RAISE EXCEPTION 'statement % is final; no line can be added to it', NEW.statement_id
                USING ERRCODE = 'restrict_violation';
        END IF;
    END IF;
    IF TG_OP = 'DELETE' THEN
        RETURN OLD;
    END IF;
    RETURN NEW;
END;
$$ LANGUAGE plpgsql;

CREATE TRIGGER billing_charge_final_immutable
    BEFORE INSERT OR UPDATE OR DELETE ON billing_charge
    FOR EACH ROW EXECUTE FUNCTION billing_refuse_final_line_change();

CREATE EXTENSION IF NOT EXISTS btree_gist;
ALTER TABLE billing_tariff ADD CONSTRAINT tariff_versions_no_overlap EXCLUDE USING gist (
    instrument_id WITH =,
    rate_category WITH =,
    purpose WITH =,
    daterange(valid_from, valid_to, '[]') WITH &&
);
"""

DROP = """
ALTER TABLE billing_tariff DROP CONSTRAINT IF EXISTS tariff_versions_no_overlap;
DROP TRIGGER IF EXISTS billing_charge_final_immutable ON billing_charge;
DROP FUNCTION IF EXISTS billing_refuse_final_line_change();
DROP TRIGGER IF EXISTS billing_statement_final_immutable ON billing_statement;
DROP FUNCTION IF EXISTS billing_refuse_final_statement_change();
"""


def forwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(CREATE, params=None)  # no %-placeholders: RAISE uses %


def backwards(apps, schema_editor):
    if schema_editor.connection.vendor == "postgresql":
        schema_editor.execute(DROP, params=None)


class Migration(migrations.Migration):
    dependencies = [("billing", "0001_initial")]
    operations = [migrations.RunPython(forwards, backwards)]
