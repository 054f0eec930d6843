"""The audit trail: one append-only entry for every change to a record, and for every import.

Who (``actor``), when (``at``, UTC), what (``action`` on ``object_type`` + ``object_id``, with the
``vehicle``), why (``reason``: a correction's reason, an import's file) and the values
(``details``). Entries are written by ``inspections.services`` (through ``inspections.audit``) in
the same transaction as the record, so a record without its entry cannot be committed.

Entries are never changed or removed: ``save()`` refuses an update, ``delete()`` and the queryset's
``update()``/``delete()`` refuse, and on PostgreSQL a trigger refuses UPDATE and DELETE (migration
0003).
"""
from __future__ import annotations

from django.conf import settings
from django.db import models
from django.utils import timezone

from .records import AppendOnlyError
from .vehicle import Vehicle


class AuditQuerySet(models.QuerySet):
    def visible_to(self, user) -> AuditQuerySet:
        from inspections.scoping import vehicle_filter

        return self.filter(vehicle_filter(user, prefix="vehicle__"))

    def update(self, **kwargs):
        raise AppendOnlyError("audit entries are never changed")

    def delete(self):
        raise AppendOnlyError("audit entries are never removed")


class AuditEntry(models.Model):
    class Action(models.TextChoices):
        CREATED = "created", "recorded"
        CORRECTED = "corrected", "corrected"
        IMPORTED = "imported", "imported a file"

    actor = models.ForeignKey(settings.AUTH_USER_MODEL, on_delete=models.PROTECT,
                              related_name="audit_entries")
    at = models.DateTimeField(default=timezone.now, db_index=True)
    action = models.CharField(max_length=12, choices=Action.choices)
    object_type = models.CharField(max_length=40, help_text="e.g. alignment_session, import")
    object_id = models.PositiveBigIntegerField(null=True, blank=True)
    vehicle = models.ForeignKey(Vehicle, null=True, blank=True, on_delete=models.PROTECT,
                                related_name="audit_entries")
    reason = models.CharField(max_length=300, blank=True)
    details = models.JSONField(default=dict, blank=True)

    objects = AuditQuerySet.as_manager()

    class Meta:
        ordering = ["at", "id"]
        indexes = [models.Index(fields=["vehicle", "at"]),
                   models.Index(fields=["object_type", "object_id"])]
        verbose_name_plural = "audit entries"

    def __str__(self) -> str:
        return f"{self.at:%Y-%m-%d %H:%M} {self.actor} {self.action} {self.object_type} {self.object_id}"

    @property
    def object_label(self) -> str:
        return self.object_type.replace("_", " ")

    def save(self, *args, **kwargs) -> None:
        if not self._state.adding:
            raise AppendOnlyError("audit entries are never changed")
        super().save(*args, **kwargs)

    def delete(self, *args, **kwargs):
        raise AppendOnlyError("audit entries are never removed")
