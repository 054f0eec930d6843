"""Admin pages for every record. Submitted sessions and checks are read-only here too."""
from django.contrib import admin

from .models import (
    AlignmentSession,
    AlignmentSpec,
    AuditEntry,
    ComponentCheck,
    ComponentLimit,
    ComponentPhoto,
    Fleet,
    Platform,
    PlatformCorner,
    Profile,
    ServiceEvent,
    Vehicle,
    WheelReading,
    Workshop,
)


class SpecInline(admin.TabularInline):
    model = AlignmentSpec
    extra = 0


class LimitInline(admin.TabularInline):
    model = ComponentLimit
    extra = 0


class CornerInline(admin.StackedInline):
    model = PlatformCorner
    extra = 0


@admin.register(Platform)
class PlatformAdmin(admin.ModelAdmin):
    list_display = ("name", "make", "model", "variant", "is_demo", "alignment_interval_km",
                    "suspension_interval_km")
    inlines = [SpecInline, LimitInline, CornerInline]


@admin.register(Vehicle)
class VehicleAdmin(admin.ModelAdmin):
    list_display = ("plate", "vin", "fleet_number", "platform", "workshop", "fleet", "owner")
    search_fields = ("plate_key", "vin", "fleet_number_key")
    list_filter = ("platform", "workshop", "fleet")


class ReadOnlyRecordAdmin(admin.ModelAdmin):
    """Append-only records: viewable, never changed or deleted here."""

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False


class ReadingInline(admin.TabularInline):
    model = WheelReading
    extra = 0
    can_delete = False

    def has_change_permission(self, request, obj=None):
        return False

    def has_add_permission(self, request, obj=None):
        return False


@admin.register(AlignmentSession)
class SessionAdmin(ReadOnlyRecordAdmin):
    list_display = ("vehicle", "measured_at", "kind", "odometer_km", "technician", "supersedes")
    list_filter = ("kind", "workshop")
    inlines = [ReadingInline]

    def has_add_permission(self, request):
        return False


@admin.register(ComponentCheck)
class CheckAdmin(ReadOnlyRecordAdmin):
    list_display = ("vehicle", "checked_at", "corner", "part", "verdict", "defect_category")
    list_filter = ("verdict", "defect_category", "part")

    def has_add_permission(self, request):
        return False


@admin.register(ServiceEvent)
class ServiceEventAdmin(ReadOnlyRecordAdmin):
    list_display = ("vehicle", "performed_at", "kind", "part", "reason", "odometer_km")


admin.site.register(Workshop)
admin.site.register(Fleet)
admin.site.register(Profile)
admin.site.register(ComponentPhoto)
admin.site.site_header = "fleetsvc administration"


@admin.register(AuditEntry)
class AuditEntryAdmin(admin.ModelAdmin):
    """The audit trail: viewable only; entries are written by the services and never changed."""

    list_display = ("at", "actor", "action", "object_type", "object_id", "vehicle", "reason")
    list_filter = ("action", "object_type")
    search_fields = ("reason", "actor__username")

    def has_add_permission(self, request):
        return False

    def has_change_permission(self, request, obj=None):
        return False

    def has_delete_permission(self, request, obj=None):
        return False
