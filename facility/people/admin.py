"""Admin for people: groups, memberships, accounts, profiles and notifications.

Thin on purpose: columns, filters and search only. Business rules live in the services.
"""

from __future__ import annotations

from django.contrib import admin
from django.contrib.auth import get_user_model
from django.contrib.auth.admin import UserAdmin as DjangoUserAdmin

from facility.people.models import Account, Group, Membership, Notification, Profile

User = get_user_model()


class ProfileInline(admin.StackedInline):
    model = Profile
    can_delete = False
    extra = 0
    fields = ["role", "rate_category", "phone"]


class UserMembershipInline(admin.TabularInline):
    model = Membership
    fk_name = "user"
    extra = 0
    autocomplete_fields = ["group"]


# The user page shows the facility's profile and group memberships beside Django's own fields.
admin.site.unregister(User)


@admin.register(User)
class UserAdmin(DjangoUserAdmin):
    inlines = [ProfileInline, UserMembershipInline]
    list_display = [
        "username",
        "first_name",
        "last_name",
        "email",
        "role",
        "rate_category",
        "is_staff",
        "is_active",
    ]
    list_select_related = ["profile"]
    list_filter = [
        "is_staff",
        "is_superuser",
        "is_active",
        "profile__role",
        "profile__rate_category",
    ]

    @admin.display(description="role", ordering="profile__role")
    def role(self, obj) -> str:
        profile = getattr(obj, "profile", None)
        return profile.get_role_display() if profile else "—"

    @admin.display(description="rate category", ordering="profile__rate_category")
    def rate_category(self, obj) -> str:
        profile = getattr(obj, "profile", None)
        return profile.get_rate_category_display() if profile else "—"


class GroupMembershipInline(admin.TabularInline):
    model = Membership
    fk_name = "group"
    extra = 0
    autocomplete_fields = ["user"]


class AccountInline(admin.TabularInline):
    model = Account
    extra = 0
    fields = ["code", "name", "kind", "valid_from", "valid_to", "is_active"]
    show_change_link = True


@admin.register(Group)
class GroupAdmin(admin.ModelAdmin):
    list_display = ["name", "leader", "shares_details", "counts_in_summaries"]
    list_select_related = ["leader"]
    list_filter = ["shares_details", "counts_in_summaries"]
    search_fields = ["name", "leader__username", "leader__last_name"]
    autocomplete_fields = ["leader"]
    inlines = [GroupMembershipInline, AccountInline]


@admin.register(Membership)
class MembershipAdmin(admin.ModelAdmin):
    list_display = ["user", "group", "joined_on"]
    list_select_related = ["user", "group"]
    list_filter = ["group"]
    search_fields = ["user__username", "user__first_name", "user__last_name", "group__name"]
    autocomplete_fields = ["user", "group"]
    date_hierarchy = "joined_on"


@admin.register(Account)
class AccountAdmin(admin.ModelAdmin):
    list_display = ["code", "name", "kind", "group", "valid_from", "valid_to", "is_active"]
    list_select_related = ["group"]
    list_filter = ["kind", "is_active", "group"]
    search_fields = ["code", "name", "group__name"]
    autocomplete_fields = ["group"]
    date_hierarchy = "valid_from"


@admin.register(Profile)
class ProfileAdmin(admin.ModelAdmin):
    list_display = ["user", "role", "rate_category", "phone"]
    list_select_related = ["user"]
    list_filter = ["role", "rate_category"]
    search_fields = ["user__username", "user__first_name", "user__last_name", "user__email"]
    autocomplete_fields = ["user"]


@admin.register(Notification)
class NotificationAdmin(admin.ModelAdmin):
    list_display = ["subject", "user", "topic", "created_at", "read_at"]
    list_select_related = ["user"]
    list_filter = [("read_at", admin.EmptyFieldListFilter)]
    search_fields = ["subject", "topic", "user__username"]
    autocomplete_fields = ["user"]
    date_hierarchy = "created_at"
    readonly_fields = ["created_at"]
