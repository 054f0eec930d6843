"""Result payloads and advice bodies stored as PostgreSQL ``json`` rather than ``jsonb`` (see
:mod:`analytics.fields`), both lz4-compressed where the server has lz4 (as 0007 did for the
payload). Other databases: no change to their storage."""
from django.db import migrations

import analytics.fields

LZ4_AVAILABLE = ("SELECT 1 FROM pg_settings WHERE name = 'default_toast_compression' "
                 "AND 'lz4' = ANY(enumvals)")
COLUMNS = (("analytics_analysisresult", "payload"), ("analytics_adviceitem", "body"))


def _compression(method: str):
    def run(apps, schema_editor):
        conn = schema_editor.connection
        if conn.vendor != "postgresql":
            return
        with conn.cursor() as cur:
            cur.execute(LZ4_AVAILABLE)
            if cur.fetchone() is None:
                return
            for table, column in COLUMNS:
                cur.execute(f"ALTER TABLE {table} ALTER COLUMN {column} SET COMPRESSION {method}")
    return run


class Migration(migrations.Migration):

    dependencies = [
        ('analytics', '0008_drop_indexes_covered_by_composites'),
    ]

    operations = [
        migrations.AlterField(
            model_name='adviceitem',
            name='body',
            field=analytics.fields.JSONDocumentField(
                help_text='The full advice: evidence, interval, limit, caution.'),
        ),
        migrations.AlterField(
            model_name='analysisresult',
            name='payload',
            field=analytics.fields.JSONDocumentField(),
        ),
        migrations.RunPython(_compression("lz4"), _compression("default")),
    ]
