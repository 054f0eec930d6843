"""Access scoping with the personas: each role sees exactly what it may."""
import pytest
from django.http import Http404

from inspections import selectors
from inspections.models import Vehicle
from inspections.scoping import get_visible_or_404
from tests.base import PersonaTestCase


class ScopingTests(PersonaTestCase):
    def visible(self, user):
        return set(Vehicle.objects.visible_to(user).values_list("plate", flat=True))

    def test_an_owner_sees_only_their_own_vehicle(self):
        assert self.visible(self.owner) == {"AB12 CDE"}
        assert self.visible(self.other_owner) == {"XY99 ZZZ"}

    def test_a_technician_sees_their_workshops_vehicles(self):
        assert self.visible(self.tech_a) == {"AB12 CDE"}
        assert self.visible(self.tech_b) == {"XY99 ZZZ", "VN70 FLT"}

    def test_a_workshop_manager_sees_the_workshop_and_a_fleet_manager_the_fleet(self):
        assert self.visible(self.manager_a) == {"AB12 CDE"}
        assert self.visible(self.fleet_manager) == {"VN70 FLT"}

    def test_an_administrator_sees_everything(self):
        assert self.visible(self.admin) == {"AB12 CDE", "XY99 ZZZ", "VN70 FLT"}

    def test_a_user_without_a_role_sees_nothing(self):
        assert self.visible(self.no_role) == set()

    def test_another_owners_vehicle_is_not_found(self):
        with pytest.raises(Http404):
            get_visible_or_404(Vehicle.objects.all(), self.owner, prefix="", pk=self.car_b.pk)

    def test_search_forgives_case_spaces_and_dashes_but_stays_in_scope(self):
        assert [v.plate for v in selectors.vehicle_search(self.tech_b, "xy-99z")] == ["XY99 ZZZ"]
        assert list(selectors.vehicle_search(self.tech_a, "xy99")) == []
        found = selectors.vehicle_search(self.tech_a, self.car_a.vin.lower())
        assert [v.pk for v in found] == [self.car_a.pk]
