"""API views: check access (``api.permissions`` → ``inspections.scoping``), validate with a
serializer, call a service. Writes only through ``inspections.services``.

Status codes: 200 read or idempotent resend; 201 stored; 304 If-None-Match matched; 400 refused
with ``{field: [reason]}``; 401 signed out; 403 the role may read but not write; 404 not visible
(or not there — the same answer); 409 the session was corrected meanwhile; 412 If-Match names
another version; 428 a correction without If-Match.
"""
from __future__ import annotations

from django.core.exceptions import ValidationError as DjangoValidationError
from django.db import IntegrityError
from django.urls import reverse
from drf_spectacular.types import OpenApiTypes
from drf_spectacular.utils import OpenApiParameter, OpenApiResponse, extend_schema
from rest_framework import generics, serializers, status
from rest_framework.authtoken.views import ObtainAuthToken
from rest_framework.exceptions import ValidationError
from rest_framework.parsers import JSONParser
from rest_framework.response import Response

from analytics.core.caution import CAUTION
from analytics.models import AdviceItem, AnalysisRequest
from analytics.services import latest_result
from inspections import selectors, services
from inspections.models import AlignmentSession, ComponentCheck, Vehicle

from . import concurrency, errors
from . import serializers as s
from .permissions import require_recorder, visible_check, visible_session, visible_vehicle

SEARCH_LIMIT = 500
TOKEN_USED = "was already used for another record; make a new token for each submit"

# ------------------------------------------------------------------------------- schema pieces

ERR_400 = OpenApiResponse(s.VALIDATION_ERRORS_SCHEMA, description="Refused; nothing stored.")
ERR_401 = OpenApiResponse(s.ErrorSerializer, description="Not signed in (send `Authorization: Token …`).")
ERR_403 = OpenApiResponse(s.ErrorSerializer,
                          description="Your role may read this vehicle but not record on it.")
ERR_404 = OpenApiResponse(s.ErrorSerializer,
                          description="Not found, or not visible to you (the same answer).")
NOT_MODIFIED = OpenApiResponse(description="Not modified: If-None-Match holds the current ETag.")
PK = OpenApiParameter("id", OpenApiTypes.INT, OpenApiParameter.PATH, description="The record's id.")
ETAG_HEADER = OpenApiParameter(
    "ETag", OpenApiTypes.STR, OpenApiParameter.HEADER, response=[200, 201],
    description="The version of the record (see the README's API section).")
LOCATION_HEADER = OpenApiParameter("Location", OpenApiTypes.STR, OpenApiParameter.HEADER,
                                   response=[201], description="Where the new record lives.")
IF_NONE_MATCH = OpenApiParameter(
    "If-None-Match", OpenApiTypes.STR, OpenApiParameter.HEADER, required=False,
    description="An ETag you hold; answered 304 without a body while it is current.")


class IncludeSupersededQuery(serializers.Serializer):
    include_superseded = serializers.BooleanField(
        required=False, default=False,
        help_text="Also list records a correction replaced (each names its `superseded_by`).")


class VehicleSearchQuery(serializers.Serializer):
    q = serializers.CharField(
        required=False, allow_blank=True, max_length=60, default="",
        help_text="Plate, VIN or fleet number, or part of one; case, spaces and dashes are ignored.")


# ------------------------------------------------------------------------------------- helpers


class ApiMixin:
    """JSON request bodies only; flat ``{field: [reason]}`` validation errors on every API view."""

    parser_classes = [JSONParser]

    def get_exception_handler(self):
        return errors.exception_handler


def _query(serializer_cls, request) -> dict:
    ser = serializer_cls(data=request.query_params)
    ser.is_valid(raise_exception=True)
    return ser.validated_data


def _record_url(record) -> str:
    name = "api:session-detail" if isinstance(record, AlignmentSession) else "api:check-detail"
    return reverse(name, args=[record.pk])


def _record_response(record, serializer_cls, code: int, request) -> Response:
    record = _reload(record)
    etag = concurrency.record_etag(record)
    headers = {"ETag": etag}
    if code == status.HTTP_201_CREATED:
        headers["Location"] = _record_url(record)
    return Response(serializer_cls(record, context={"request": request}).data, status=code,
                    headers=headers)


def _sessions() -> object:
    return concurrency.with_newer(AlignmentSession.objects.select_related("technician")
                                  .prefetch_related("readings"))


def _checks() -> object:
    return concurrency.with_newer(ComponentCheck.objects.select_related("technician"))


def _reload(record):
    qs = _sessions() if isinstance(record, AlignmentSession) else _checks()
    return qs.get(pk=record.pk)


def _ref(record) -> dict:
    return {"id": record.pk, "etag": concurrency.record_etag(record), "url": _record_url(record)}


def _conflict(original: AlignmentSession) -> Response:
    newer = AlignmentSession.objects.select_related("technician").get(supersedes=original)
    latest = concurrency.chain_end(newer)
    detail = (f"session {original.pk} was already corrected by session {newer.pk} "
              f"({newer.technician.username}, {newer.created_at.isoformat()}); nothing was stored. "
              f"Fetch session {latest.pk}, the current version, and correct that one if your change "
              "still applies.")
    return Response({"detail": detail, "code": "already_corrected", "newer": _ref(newer),
                     "latest": _ref(latest)}, status=status.HTTP_409_CONFLICT)


def _existing(model, token, *, belongs) -> object | None:
    """The record a resend of ``token`` stored before, if it is this request's; else refuse the token."""
    existing = model.objects.filter(client_token=token).first()
    if existing is None:
        return None
    if not belongs(existing):
        raise ValidationError({"client_token": [TOKEN_USED]})
    return existing


# --------------------------------------------------------------------------------------- token


class ObtainToken(ApiMixin, ObtainAuthToken):
    """DRF's ``obtain_auth_token``: user name and password in, the user's API token out."""

    parser_classes = ObtainAuthToken.parser_classes
    serializer_class = s.TokenRequestSerializer

    @extend_schema(
        tags=["auth"], auth=[], summary="Get your API token",
        description="Send it on every other request as `Authorization: Token <token>`.",
        request=s.TokenRequestSerializer,
        responses={200: s.TokenSerializer, 400: ERR_400})
    def post(self, request, *args, **kwargs):
        return super().post(request, *args, **kwargs)


# ------------------------------------------------------------------------------------ vehicles


@extend_schema(tags=["vehicles"])
class VehicleList(ApiMixin, generics.ListAPIView):
    """Vehicles the caller may see: all of them, or those matching ``q``."""

    serializer_class = s.VehicleSerializer
    queryset = Vehicle.objects.none()

    @extend_schema(
        summary="Vehicles you may see, or a search among them",
        parameters=[VehicleSearchQuery],
        responses={200: s.VehicleSerializer(many=True), 400: ERR_400, 401: ERR_401})
    def get(self, request, *args, **kwargs):
        return super().get(request, *args, **kwargs)

    def get_queryset(self):
        if getattr(self, "swagger_fake_view", False):
            return Vehicle.objects.none()
        text = _query(VehicleSearchQuery, self.request)["q"].strip()
        if text:
            return selectors.vehicle_search(self.request.user, text, limit=SEARCH_LIMIT)
        return selectors.vehicles_for(self.request.user).order_by("plate", "pk")


@extend_schema(tags=["vehicles"])
class VehicleDetail(ApiMixin, generics.GenericAPIView):
    """One visible vehicle, versioned by the newest records stored for it."""

    serializer_class = s.VehicleDetailSerializer
    queryset = Vehicle.objects.none()

    @extend_schema(summary="One vehicle, with the newest records stored for it",
                   parameters=[PK, IF_NONE_MATCH, ETAG_HEADER],
                   responses={200: s.VehicleDetailSerializer, 304: NOT_MODIFIED, 401: ERR_401,
                              404: ERR_404})
    def get(self, request, pk: int):
        vehicle = visible_vehicle(request.user, pk)
        newest_session, newest_check = concurrency.vehicle_versions(vehicle)
        etag = concurrency.vehicle_etag(vehicle, newest_session, newest_check)
        if concurrency.not_modified(request, etag):
            return Response(status=status.HTTP_304_NOT_MODIFIED, headers={"ETag": etag})
        vehicle.newest_session_id, vehicle.newest_check_id = newest_session, newest_check
        vehicle.last_odometer_km = services.last_odometer_km(vehicle)
        vehicle.etag = etag
        return Response(self.get_serializer(vehicle).data, headers={"ETag": etag})


# ------------------------------------------------------------------------------------ sessions


@extend_schema(tags=["sessions"])
class VehicleSessions(ApiMixin, generics.ListAPIView):
    """A vehicle's alignment sessions: list (current by default) and store."""

    serializer_class = s.SessionSerializer
    queryset = AlignmentSession.objects.none()

    @extend_schema(summary="The vehicle's alignment sessions, oldest first",
                   parameters=[PK, IncludeSupersededQuery],
                   responses={200: s.SessionSerializer(many=True), 400: ERR_400, 401: ERR_401,
                              404: ERR_404})
    def get(self, request, *args, **kwargs):
        return super().get(request, *args, **kwargs)

    def get_queryset(self):
        if getattr(self, "swagger_fake_view", False):
            return AlignmentSession.objects.none()
        vehicle = visible_vehicle(self.request.user, self.kwargs["pk"])
        qs = _sessions().filter(vehicle=vehicle)
        if not _query(IncludeSupersededQuery, self.request)["include_superseded"]:
            qs = qs.filter(newer_pk__isnull=True)
        return qs.order_by("measured_at", "pk")

    @extend_schema(
        summary="Store an alignment session (technicians and administrators)",
        description="Readings in degrees with ISO 8855 signs (toe positive = toe-in). The same "
                    "`client_token` sent again answers 200 with the session already stored.",
        parameters=[PK, ETAG_HEADER, LOCATION_HEADER],
        request=s.SessionCreateSerializer,
        responses={201: s.SessionSerializer, 200: s.SessionSerializer, 400: ERR_400, 401: ERR_401,
                   403: ERR_403, 404: ERR_404})
    def post(self, request, pk: int):
        vehicle = visible_vehicle(request.user, pk)
        require_recorder(request.user)
        ser = s.SessionCreateSerializer(data=request.data)
        ser.is_valid(raise_exception=True)
        kwargs = ser.service_kwargs()
        stored = _existing(AlignmentSession, kwargs["client_token"],
                           belongs=lambda r: r.vehicle_id == vehicle.pk and r.supersedes_id is None)
        if stored is not None:
            return _record_response(stored, s.SessionSerializer, status.HTTP_200_OK, request)
        try:
            session = services.session_submit(vehicle=vehicle, technician=request.user, **kwargs)
        except DjangoValidationError as exc:
            raise ValidationError(errors.service_errors(exc)) from None
        return _record_response(session, s.SessionSerializer, status.HTTP_201_CREATED, request)


@extend_schema(tags=["sessions"])
class SessionDetail(ApiMixin, generics.GenericAPIView):
    """One alignment session with its readings and its place in the correction chain."""

    serializer_class = s.SessionSerializer
    queryset = AlignmentSession.objects.none()

    @extend_schema(summary="One alignment session with its wheel readings",
                   parameters=[PK, IF_NONE_MATCH, ETAG_HEADER],
                   responses={200: s.SessionSerializer, 304: NOT_MODIFIED, 401: ERR_401, 404: ERR_404})
    def get(self, request, pk: int):
        session = visible_session(request.user, pk, _sessions())
        etag = concurrency.record_etag(session)
        if concurrency.not_modified(request, etag):
            return Response(status=status.HTTP_304_NOT_MODIFIED, headers={"ETag": etag})
        return Response(self.get_serializer(session).data, headers={"ETag": etag})


@extend_schema(tags=["sessions"])
class SessionCorrections(ApiMixin, generics.GenericAPIView):
    """Corrections of a session, guarded by If-Match (optimistic concurrency)."""

    serializer_class = s.CorrectionSerializer
    queryset = AlignmentSession.objects.none()

    @extend_schema(
        summary="Correct a session: a new session that supersedes it (technicians and administrators)",
        description="Send `If-Match` with the ETag of the version you correct (from GET "
                    "/api/v1/sessions/{pk}). If another tablet corrected it first the answer is 409 "
                    "naming the newer record and nothing is stored. Values left out are carried "
                    "from the corrected session; `readings`, when given, replace all of them. The "
                    "same `client_token` sent again answers 200 with the correction already stored.",
        parameters=[
            PK,
            OpenApiParameter("If-Match", OpenApiTypes.STR, OpenApiParameter.HEADER, required=True,
                             description='The ETag of the session being corrected, e.g. "session-12".'),
            ETAG_HEADER, LOCATION_HEADER,
        ],
        request=s.CorrectionSerializer,
        responses={
            201: s.SessionSerializer, 200: s.SessionSerializer, 400: ERR_400, 401: ERR_401,
            403: ERR_403, 404: ERR_404,
            409: OpenApiResponse(s.ConflictSerializer, description="Corrected meanwhile by another "
                                 "submit; nothing stored. `latest` is the version to look at."),
            412: OpenApiResponse(s.PreconditionFailedSerializer,
                                 description="If-Match names another version of this session."),
            428: OpenApiResponse(s.ErrorSerializer, description="If-Match is missing (or `*`)."),
        })
    def post(self, request, pk: int):
        original = visible_session(request.user, pk, AlignmentSession.objects.select_related("vehicle"))
        require_recorder(request.user)
        ser = s.CorrectionSerializer(data=request.data)
        ser.is_valid(raise_exception=True)
        stored = _existing(AlignmentSession, ser.validated_data["client_token"],
                           belongs=lambda r: r.supersedes_id == original.pk)
        if stored is not None:
            return _record_response(stored, s.SessionSerializer, status.HTTP_200_OK, request)
        tags = concurrency.if_match(request)
        if tags is None or "*" in tags:
            return Response({"detail": f"a correction needs If-Match with the ETag of the session it "
                                       f"corrects (GET {_record_url(original)} gives it)"},
                            status=status.HTTP_428_PRECONDITION_REQUIRED)
        if concurrency.newer_id(original) is not None:
            return _conflict(original)
        current = concurrency.record_etag(original)
        if not concurrency.strong_match(tags, current):
            return Response({"detail": f"If-Match does not name the current version of session "
                                       f"{original.pk}; nothing was stored", "current_etag": current},
                            status=status.HTTP_412_PRECONDITION_FAILED)
        try:
            session = services.session_correct(
                original=original, author=request.user,
                reason=ser.validated_data["correction_reason"], **ser.changes_for(original))
        except DjangoValidationError as exc:
            # A correction that won the race between our check and the service's is a conflict.
            if AlignmentSession.objects.filter(supersedes=original).exists():
                return _conflict(original)
            raise ValidationError(errors.service_errors(exc)) from None
        except IntegrityError:
            # The one-to-one ``supersedes``: two corrections raced past both checks; one is stored.
            if AlignmentSession.objects.filter(supersedes=original).exists():
                return _conflict(original)
            raise
        return _record_response(session, s.SessionSerializer, status.HTTP_201_CREATED, request)


# -------------------------------------------------------------------------------------- checks


@extend_schema(tags=["component checks"])
class VehicleChecks(ApiMixin, generics.ListAPIView):
    """A vehicle's component checks: list (current by default) and store."""

    serializer_class = s.ComponentCheckSerializer
    queryset = ComponentCheck.objects.none()

    @extend_schema(summary="The vehicle's ball-joint and bush checks, oldest first",
                   parameters=[PK, IncludeSupersededQuery],
                   responses={200: s.ComponentCheckSerializer(many=True), 400: ERR_400, 401: ERR_401,
                              404: ERR_404})
    def get(self, request, *args, **kwargs):
        return super().get(request, *args, **kwargs)

    def get_queryset(self):
        if getattr(self, "swagger_fake_view", False):
            return ComponentCheck.objects.none()
        vehicle = visible_vehicle(self.request.user, self.kwargs["pk"])
        qs = _checks().filter(vehicle=vehicle)
        if not _query(IncludeSupersededQuery, self.request)["include_superseded"]:
            qs = qs.filter(newer_pk__isnull=True)
        return qs.order_by("checked_at", "pk")

    @extend_schema(
        summary="Store a component check (technicians and administrators)",
        description="One catalogue part at one corner: play (mm, with how it was measured), "
                    "deflection (mm, under a force in N), findings and a verdict. The same "
                    "`client_token` sent again answers 200 with the check already stored.",
        parameters=[PK, ETAG_HEADER, LOCATION_HEADER],
        request=s.ComponentCheckCreateSerializer,
        responses={201: s.ComponentCheckSerializer, 200: s.ComponentCheckSerializer, 400: ERR_400,
                   401: ERR_401, 403: ERR_403, 404: ERR_404})
    def post(self, request, pk: int):
        vehicle = visible_vehicle(request.user, pk)
        require_recorder(request.user)
        ser = s.ComponentCheckCreateSerializer(data=request.data)
        ser.is_valid(raise_exception=True)
        kwargs = dict(ser.validated_data)
        stored = _existing(ComponentCheck, kwargs["client_token"],
                           belongs=lambda r: r.vehicle_id == vehicle.pk and r.supersedes_id is None)
        if stored is not None:
            return _record_response(stored, s.ComponentCheckSerializer, status.HTTP_200_OK, request)
        session_id = kwargs.pop("session")
        if session_id is not None:
            kwargs["session"] = AlignmentSession.objects.filter(vehicle=vehicle, pk=session_id).first()
            if kwargs["session"] is None:
                raise ValidationError({"session": [f"no session {session_id} on this vehicle"]})
        try:
            check = services.component_check_submit(vehicle=vehicle, technician=request.user, **kwargs)
        except DjangoValidationError as exc:
            raise ValidationError(errors.service_errors(exc)) from None
        return _record_response(check, s.ComponentCheckSerializer, status.HTTP_201_CREATED, request)


@extend_schema(tags=["component checks"])
class CheckDetail(ApiMixin, generics.GenericAPIView):
    """One component check."""

    serializer_class = s.ComponentCheckSerializer
    queryset = ComponentCheck.objects.none()

    @extend_schema(summary="One component check",
                   parameters=[PK, IF_NONE_MATCH, ETAG_HEADER],
                   responses={200: s.ComponentCheckSerializer, 304: NOT_MODIFIED, 401: ERR_401,
                              404: ERR_404})
    def get(self, request, pk: int):
        check = visible_check(request.user, pk, _checks())
        etag = concurrency.record_etag(check)
        if concurrency.not_modified(request, etag):
            return Response(status=status.HTTP_304_NOT_MODIFIED, headers={"ETag": etag})
        return Response(self.get_serializer(check).data, headers={"ETag": etag})


# -------------------------------------------------------------------------------------- advice


@extend_schema(tags=["advice"])
class VehicleAdvice(ApiMixin, generics.GenericAPIView):
    """The vehicle's current advice, each item with the caution."""

    serializer_class = s.AdviceSerializer
    queryset = AdviceItem.objects.none()

    @extend_schema(
        summary="The vehicle's current service advice (read-only)",
        description="Each item says what, by when (date and km), why, how sure, the manufacturer "
                    "limit it respects, and carries the caution: advisory only; confirm with the "
                    "manufacturer's data and a qualified, licensed inspection.",
        parameters=[PK], responses={200: s.AdviceSerializer, 401: ERR_401, 404: ERR_404})
    def get(self, request, pk: int):
        vehicle = visible_vehicle(request.user, pk)
        result = latest_result(vehicle)
        items = AdviceItem.objects.filter(vehicle=vehicle, result=result) if result else []
        open_request = AnalysisRequest.objects.filter(vehicle=vehicle, done_at__isnull=True).exists()
        state = "pending" if result is None else ("updating" if open_request else "ready")
        body = {"vehicle": vehicle.pk, "status": state, "result": result, "caution": CAUTION,
                "items": items}
        return Response(self.get_serializer(body).data)
