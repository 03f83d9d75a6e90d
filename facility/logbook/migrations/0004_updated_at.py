"""When each specimen, coating and session was last saved (rows that exist get the migration's
time: their real history is unknown, and "changed now" only makes readers look at them once)."""

import django.utils.timezone
from django.db import migrations, models


def _field() -> models.DateTimeField:
    return models.DateTimeField(auto_now=True, db_index=True, default=django.utils.timezone.now)


class Migration(migrations.Migration):
    dependencies = [("logbook", "0003_specimen_attribute_indexes")]

    operations = [
        migrations.AddField(
            model_name="specimen", name="updated_at", field=_field(), preserve_default=False
        ),
        migrations.AddField(
            model_name="coating", name="updated_at", field=_field(), preserve_default=False
        ),
        migrations.AddField(
            model_name="instrumentsession",
            name="updated_at",
            field=_field(),
            preserve_default=False,
        ),
        migrations.AddField(
            model_name="historicalinstrumentsession",
            name="updated_at",
            field=models.DateTimeField(
                blank=True, db_index=True, editable=False, default=django.utils.timezone.now
            ),
            preserve_default=False,
        ),
    ]
