"""Base test case with the personas every access test uses.

Two workshops (A, B); a fleet F whose vehicles workshop A maintains; two owners; technicians of
both workshops; a workshop manager of A, a fleet manager of F and an administrator.
"""
from __future__ import annotations

from django.contrib.auth import get_user_model
from django.test import TestCase

from tests import factories as f


class PersonaTestCase(TestCase):
    @classmethod
    def setUpTestData(cls):
        cls.workshop_a = f.make_workshop("Workshop A")
        cls.workshop_b = f.make_workshop("Workshop B")
        cls.fleet = f.make_fleet("Fleet F")
        cls.platform = f.make_platform("Platform P")
        cls.owner = f.make_user("owner", "owner")
        cls.other_owner = f.make_user("other-owner", "owner")
        cls.tech_a = f.make_user("tech-a", "technician", workshop=cls.workshop_a)
        cls.tech_b = f.make_user("tech-b", "technician", workshop=cls.workshop_b)
        cls.manager_a = f.make_user("manager-a", "manager", workshop=cls.workshop_a)
        cls.fleet_manager = f.make_user("fleet-manager", "manager", fleet=cls.fleet)
        cls.admin = f.make_user("admin", "administrator")
        cls.no_role = get_user_model().objects.create_user("no-role", password="pw-test-123")
        # owner's car at workshop A; other owner's car at workshop B; a fleet van at workshop B.
        cls.car_a = f.make_vehicle(platform=cls.platform, workshop=cls.workshop_a,
                                   owner=cls.owner, plate="AB12 CDE")
        cls.car_b = f.make_vehicle(platform=cls.platform, workshop=cls.workshop_b,
                                   owner=cls.other_owner, plate="XY99 ZZZ")
        cls.van_f = f.make_vehicle(platform=cls.platform, workshop=cls.workshop_b,
                                   fleet=cls.fleet, plate="VN70 FLT")
