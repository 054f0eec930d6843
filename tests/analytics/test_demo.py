"""The demo builder makes an invented, labelled scenario whose personas see what their role allows."""
import pytest
from django.contrib.auth import authenticate
from django.core.management import call_command

from analytics import services
from analytics.demo import scenario
from inspections.models import AlignmentSpec, Platform, Vehicle

pytestmark = pytest.mark.django_db


def build_small():
    return scenario.build(password="pw-demo-test", vans=3, hire_cars=2, private_cars=3)


def test_the_demo_labels_every_platform_and_spec_as_demo_data():
    build_small()
    assert Platform.objects.exists()
    assert not Platform.objects.filter(is_demo=False).exists()
    for platform in Platform.objects.all():
        assert all(src == "demo" for src in platform.sources.values())
    assert set(AlignmentSpec.objects.values_list("source", flat=True)) == {"demo"}


def test_the_demo_personas_sign_in_and_see_only_their_share():
    build_small()
    tech = authenticate(username="demo-tech", password="pw-demo-test")
    manager = authenticate(username="demo-manager", password="pw-demo-test")
    owner = authenticate(username="demo-owner", password="pw-demo-test")
    assert tech and manager and owner
    all_vehicles = Vehicle.objects.count()
    mine = Vehicle.objects.visible_to(owner)
    assert 0 < mine.count() < all_vehicles
    assert set(mine.values_list("owner", flat=True)) == {owner.pk}
    eastgate = set(Vehicle.objects.visible_to(tech).values_list("workshop__name", flat=True))
    assert eastgate == {"Eastgate Service Bay (demo)"}
    assert set(Vehicle.objects.visible_to(manager)) == set(Vehicle.objects.visible_to(tech))


def test_the_demo_history_holds_drift_adjustments_and_replacements_and_analyses():
    counts = build_small()
    assert counts["vehicles"] == 8 and counts["sessions"] > 8 * 8
    assert services.fleet_recompute() == 8
    kinds = {a["kind"] for v in Vehicle.objects.all()
             for a in services.latest_result(v).payload["advice"]}
    assert "alignment_check" in kinds


def test_building_the_demo_twice_is_refused_and_reset_rebuilds_it(capsys):
    build_small()
    with pytest.raises(RuntimeError):
        build_small()
    services.demo_delete()
    build_small()
    assert Vehicle.objects.count() == 8


def test_the_command_prints_the_logins():
    call_command("build_demo", "--password", "pw-x", "--no-analysis")
    assert Vehicle.objects.filter(is_demo=True).count() == 60


def test_make_demo_run_twice_keeps_the_existing_demo(capsys):
    call_command("build_demo", "--password", "pw-x", "--no-analysis")
    before = Vehicle.objects.count()
    call_command("build_demo", "--password", "pw-x", "--if-missing")
    assert Vehicle.objects.count() == before
    assert "kept" in capsys.readouterr().out


def test_a_demo_with_new_records_can_still_be_reset(mailoutbox):
    import datetime as dt

    from inspections import services as records
    from inspections.models import AlignmentSession
    from tests import factories as f

    build_small()
    from django.contrib.auth import get_user_model

    tech = get_user_model().objects.get(username="demo-tech")
    car = Vehicle.objects.visible_to(tech).first()
    last = max(AlignmentSession.objects.filter(vehicle=car).values_list("odometer_km", flat=True))
    records.session_submit(vehicle=car, technician=tech, measured_at=f.at(0), odometer_km=last + 10,
                           kind="as_found", equipment_id="RIG", readings=f.readings(),
                           equipment_calibrated_on=dt.date.today() - dt.timedelta(days=30))
    services.demo_delete()  # the new session's audit entry goes with the demo
    assert not Vehicle.objects.filter(is_demo=True).exists()


def test_building_the_demo_mails_no_owner_reports(mailoutbox):
    call_command("build_demo", "--password", "pw-x")
    assert mailoutbox == []
