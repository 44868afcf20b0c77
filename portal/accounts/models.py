"""Sites (labs), studies, who belongs where with which role, and API tokens."""

import hashlib
import secrets

from django.conf import settings
from django.core.validators import validate_slug
from django.db import models
from django.utils import timezone


class Study(models.Model):
    """A consortium study; sites take part in one or more studies."""

    slug = models.SlugField(unique=True, validators=[validate_slug])
    name = models.CharField(max_length=200)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["slug"]
        verbose_name_plural = "studies"

    def __str__(self):
        return self.name


class Site(models.Model):
    """A lab that records and uploads EEG sessions."""

    slug = models.SlugField(unique=True, validators=[validate_slug])
    name = models.CharField(max_length=200)
    studies = models.ManyToManyField(Study, related_name="sites", blank=True)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["slug"]

    def __str__(self):
        return self.name


class Role(models.TextChoices):
    DATA_MANAGER = "data_manager", "site data manager"
    ANALYST = "analyst", "site analyst"
    STUDY_LEAD = "study_lead", "study lead"
    AUDITOR = "auditor", "auditor"
    OPERATOR = "operator", "operator"


#: Roles whose holders see every site of the study they hold the role in.
STUDY_WIDE_ROLES = frozenset({Role.STUDY_LEAD, Role.AUDITOR})


class Membership(models.Model):
    """A person's role at a site within one study. A site may take part in several studies;
    a role held for one of them grants nothing in the others."""

    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="memberships"
    )
    site = models.ForeignKey(Site, on_delete=models.CASCADE, related_name="memberships")
    study = models.ForeignKey(Study, on_delete=models.CASCADE, related_name="memberships")
    role = models.CharField(max_length=20, choices=Role.choices)
    created_at = models.DateTimeField(default=timezone.now)

    class Meta:
        constraints = [
            models.UniqueConstraint(fields=["user", "site", "study", "role"],
                                    name="one_role_once_per_site_and_study")
        ]
        ordering = ["study__slug", "site__slug", "user__username"]

    def __str__(self):
        return (f"{self.user} — {self.get_role_display()} at {self.site.slug} "
                f"in {self.study.slug}")


def hash_token(raw):
    return hashlib.sha256(raw.encode("utf-8")).hexdigest()


class TokenScope(models.TextChoices):
    READ_WRITE = "read_write", "read and write (the token's owner's roles)"
    READ = "read", "read only (lists and downloads; every write is refused)"


class ApiToken(models.Model):
    """A token for scripts and lab servers; only its sha256 is kept, the raw value shown once."""

    PREFIX = "cairn_"

    user = models.ForeignKey(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="api_tokens"
    )
    name = models.CharField(max_length=100, help_text="What the token is for, e.g. 'lab server'.")
    lookup = models.CharField(max_length=12, unique=True, editable=False)
    digest = models.CharField(max_length=64, editable=False)
    created_at = models.DateTimeField(default=timezone.now)
    last_used_at = models.DateTimeField(null=True, blank=True)
    revoked_at = models.DateTimeField(null=True, blank=True)
    expires_at = models.DateTimeField(
        null=True, blank=True, help_text="After this moment the token is refused; blank: never.")
    scope = models.CharField(max_length=10, choices=TokenScope.choices,
                             default=TokenScope.READ_WRITE)

    class Meta:
        ordering = ["-created_at"]

    def __str__(self):
        return f"{self.name} ({self.PREFIX}{self.lookup}…)"

    @property
    def read_only(self):
        return self.scope == TokenScope.READ

    def expired(self, now=None):
        return self.expires_at is not None and self.expires_at <= (now or timezone.now())

    @classmethod
    def issue(cls, user, name, *, read_only=False, expires_at=None):
        """Create a token; returns (token, raw value). The raw value is not kept anywhere."""
        lookup = secrets.token_hex(6)
        secret = secrets.token_urlsafe(32)
        raw = f"{cls.PREFIX}{lookup}_{secret}"
        token = cls.objects.create(
            user=user, name=name, lookup=lookup, digest=hash_token(raw), expires_at=expires_at,
            scope=TokenScope.READ if read_only else TokenScope.READ_WRITE)
        return token, raw

    @classmethod
    def verify(cls, raw):
        """(token, None) for a usable raw value; (None, "invalid") for an unknown, revoked or
        wrong value or an inactive account; (token, "expired") past ``expires_at`` (the token
        only says when it expired: it signs nobody in)."""
        if not raw or not raw.startswith(cls.PREFIX):
            return None, "invalid"
        lookup = raw[len(cls.PREFIX):].split("_", 1)[0]
        token = cls.objects.select_related("user").filter(lookup=lookup).first()
        if token is None or token.revoked_at is not None or not token.user.is_active:
            return None, "invalid"
        if not secrets.compare_digest(token.digest, hash_token(raw)):
            return None, "invalid"
        if token.expired():
            return token, "expired"
        cls.objects.filter(pk=token.pk).update(last_used_at=timezone.now())
        return token, None

    @classmethod
    def authenticate(cls, raw):
        """The active token for a raw value, or None."""
        token, problem = cls.verify(raw)
        return token if problem is None else None


class LoginFailure(models.Model):
    """One failed log-in, kept to throttle guessing per account and per address."""

    username = models.CharField(max_length=150, db_index=True)
    address = models.GenericIPAddressField(null=True, blank=True, db_index=True)
    at = models.DateTimeField(default=timezone.now, db_index=True)

    class Meta:
        ordering = ["-at"]


class LoginRefusal(models.Model):
    """Refused log-ins of one throttled account or address in one window: the first makes an
    audit event, the others only count here."""

    key = models.CharField(max_length=200, help_text="account:<name> or address:<IP>")
    window_start = models.DateTimeField()
    count = models.PositiveIntegerField(default=1)
    last_at = models.DateTimeField(default=timezone.now)

    class Meta:
        ordering = ["-window_start", "key"]
        constraints = [
            models.UniqueConstraint(fields=["key", "window_start"], name="one_count_per_window")
        ]


class AccountFlags(models.Model):
    """Per-person flags: a person given a one-time password must choose their own first."""

    user = models.OneToOneField(
        settings.AUTH_USER_MODEL, on_delete=models.CASCADE, related_name="account_flags"
    )
    must_change_password = models.BooleanField(default=False)
    time_zone = models.CharField(max_length=64, blank=True,
                                 help_text="IANA time zone for dates on pages; blank: the "
                                           "portal's default.")

    @classmethod
    def require_new_password(cls, user, required=True):
        cls.objects.update_or_create(user=user, defaults={"must_change_password": required})

    @classmethod
    def needs_new_password(cls, user):
        return cls.objects.filter(user=user, must_change_password=True).exists()
