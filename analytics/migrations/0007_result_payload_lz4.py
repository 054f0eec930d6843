"""Result payloads compressed with lz4 where the PostgreSQL server has it (PostgreSQL 14+ built
with lz4, as Debian's is): compressing a payload is most of what storing it costs the server,
and lz4 does it several times faster than the default pglz at about the same size. Only values
written afterwards are affected; SQLite and servers without lz4 keep their default."""
from django.db import migrations

LZ4_AVAILABLE = ("SELECT 1 FROM pg_settings WHERE name = 'default_toast_compression' "
                 "AND 'lz4' = ANY(enumvals)")


def _set(apps, schema_editor, method: str) -> None:
    conn = schema_editor.connection
    if conn.vendor != "postgresql":
        return
    with conn.cursor() as cur:
        cur.execute(LZ4_AVAILABLE)
        if cur.fetchone() is None:
            return
        cur.execute(f"ALTER TABLE analytics_analysisresult ALTER COLUMN payload "
                    f"SET COMPRESSION {method}")


def forwards(apps, schema_editor):
    _set(apps, schema_editor, "lz4")


def backwards(apps, schema_editor):
    _set(apps, schema_editor, "default")


class Migration(migrations.Migration):

    dependencies = [
        ("analytics", "0006_compliance_outcomes"),
    ]

    operations = [migrations.RunPython(forwards, backwards)]
