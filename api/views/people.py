"""Who the caller is, and the accounts they may charge."""

from __future__ import annotations

from django.contrib.auth import get_user_model
from django.contrib.auth.models import AbstractBaseUser
from django.db.models import QuerySet
from django_filters.rest_framework import DjangoFilterBackend
from drf_spectacular.utils import extend_schema, extend_schema_view
from rest_framework.permissions import IsAuthenticated
from rest_framework.request import Request
from rest_framework.response import Response
from rest_framework.views import APIView

from api.filters import AccountFilter
from api.permissions import token_of
from api.serializers.people import AccountOut, MeOut
from api.views.base import ApiViewSet
from facility.people import queries as people
from facility.people.models import Account


def accounts_visible_to(user: AbstractBaseUser) -> QuerySet[Account]:
    """Accounts of the groups a person may see (people.visible_to): staff all, others their own."""
    if not user.is_authenticated:
        return Account.objects.none()
    return Account.objects.filter(group__in=people.visible_to(user)).select_related("group")


def users_visible_to(user: AbstractBaseUser) -> QuerySet:
    """Whom a person may name in a write: staff anyone active, others only themselves."""
    users = get_user_model().objects.filter(is_active=True)
    return users if people.is_staff(user) else users.filter(pk=user.pk)


@extend_schema_view(
    list=extend_schema(summary="List the accounts you may see", responses=AccountOut),
)
class AccountViewSet(ApiViewSet):
    """Accounts (cost centres, grants, purchase orders) of your groups; staff see all."""

    queryset = Account.objects.none()
    filter_backends = [DjangoFilterBackend]
    filterset_class = AccountFilter
    ordering = "code"

    def get_queryset(self):
        return accounts_visible_to(self.request.user)

    def list(self, request: Request) -> Response:
        return self.page(self.get_queryset(), AccountOut)


class MeView(APIView):
    """Who the caller is; any valid token may ask, whatever its scopes."""

    permission_classes = [IsAuthenticated]

    @extend_schema(summary="Who you are, and what your token may do", responses=MeOut)
    def get(self, request: Request) -> Response:
        user = request.user
        me = {
            "username": user.get_username(),
            "first_name": user.first_name,
            "last_name": user.last_name,
            "is_staff": people.is_staff(user),
            "groups": list(people.groups_of(user).order_by("name")),
            "token": token_of(request),
        }
        return Response(MeOut(me).data)
