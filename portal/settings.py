"""Cairn settings. Everything comes from environment variables with safe defaults.

Unset, the portal runs on the embedded default: an SQLite file and kombu's filesystem broker
under ``var/``. Deployments and CI set ``DATABASE_URL`` (PostgreSQL) and ``CELERY_BROKER_URL``
(Redis).
"""

import os
import re
import warnings
from pathlib import Path

import dj_database_url
from django.core.exceptions import ImproperlyConfigured
from django.utils.functional import lazy

from portal.embedded import secret_key

BASE_DIR = Path(__file__).resolve().parent.parent
VAR_DIR = Path(os.environ.get("CAIRN_VAR_DIR", BASE_DIR / "var")).resolve()


def env_bool(name, default=False):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    value = raw.strip().lower()
    if value in {"1", "true", "yes", "on"}:
        return True
    if value in {"0", "false", "no", "off"}:
        return False
    raise ImproperlyConfigured(f"{name} must be true or false, got {raw!r}")


def env_list(name, default=""):
    return [item.strip() for item in os.environ.get(name, default).split(",") if item.strip()]


def env_float(name, default):
    raw = os.environ.get(name)
    if raw is None or raw == "":
        return default
    try:
        return float(raw)
    except ValueError as exc:
        raise ImproperlyConfigured(f"{name} must be a number, got {raw!r}") from exc


DEBUG = env_bool("DEBUG", False)

SECRET_KEY = os.environ.get("SECRET_KEY", "")
if not SECRET_KEY:
    if not DEBUG and not env_bool("CAIRN_EMBEDDED", True):
        raise ImproperlyConfigured("SECRET_KEY must be set in a deployment (CAIRN_EMBEDDED=false)")
    # Embedded default: a key kept in var/ so sessions survive restarts of the demo, read (or
    # made) the first time something signs; settings write no file when they load.
    SECRET_KEY = lazy(secret_key, str)(VAR_DIR / "secret_key")

ALLOWED_HOSTS = env_list("ALLOWED_HOSTS", "127.0.0.1,localhost")
CSRF_TRUSTED_ORIGINS = env_list("CSRF_TRUSTED_ORIGINS")

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "portal.accounts",
    "portal.audit",
    "portal.jobs",
    "portal.studies",
    "portal.datasets",
    "portal.quality",
    "portal.features",
    "portal.training",
    "portal.lineage",
    "portal.dashboard",
    "portal.demo",
]

MIDDLEWARE = [
    "portal.api_errors.ApiErrorMiddleware",  # first: it sees every answer under /api/
    "django.middleware.security.SecurityMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "portal.accounts.tokens.ApiTokenMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "portal.accounts.tz.TimeZoneMiddleware",
    "portal.accounts.tokens.OneTimePasswordMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
]

# Sessions read from each web process's memory, written through to the database.
SESSION_ENGINE = "django.contrib.sessions.backends.cached_db"

ROOT_URLCONF = "portal.urls"
WSGI_APPLICATION = "portal.wsgi.application"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [BASE_DIR / "portal" / "templates"],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
            ],
        },
    },
]

DATABASE_URL = os.environ.get("DATABASE_URL", "")
if DATABASE_URL:
    DATABASES = {"default": dj_database_url.parse(DATABASE_URL, conn_max_age=60)}
else:
    DATABASES = {
        "default": {
            # Django's SQLite backend that makes the file's folder when it first connects.
            "ENGINE": "portal.embedded.sqlite3",
            "NAME": VAR_DIR / "cairn.sqlite3",
            # Web and worker processes share the file: wait for locks instead of failing.
            "OPTIONS": {"timeout": 30, "transaction_mode": "IMMEDIATE", "init_command": (
                "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL;"
            )},
        }
    }
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.UserAttributeSimilarityValidator"},
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator",
     "OPTIONS": {"min_length": 10}},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
    {"NAME": "django.contrib.auth.password_validation.NumericPasswordValidator"},
]
LOGIN_URL = "accounts:login"
LOGIN_REDIRECT_URL = "dashboard:home"
LOGOUT_REDIRECT_URL = "accounts:login"

LANGUAGE_CODE = "en-gb"
TIME_ZONE = os.environ.get("CAIRN_TIME_ZONE", "UTC")
USE_I18N = True
USE_TZ = True
# One way of writing dates on pages ("4 Dec 2026, 13:05"); portal/formats/ says why twice.
FORMAT_MODULE_PATH = ["portal.formats"]
from portal.formats import (  # noqa: E402, F401  (the same formats for any other language)
    DATE_FORMAT,
    DATETIME_FORMAT,
    SHORT_DATE_FORMAT,
    SHORT_DATETIME_FORMAT,
    TIME_FORMAT,
)

STATIC_URL = "static/"
STATIC_ROOT = Path(os.environ.get("CAIRN_STATIC_ROOT", VAR_DIR / "static"))
STATICFILES_DIRS = [BASE_DIR / "portal" / "static"]
# Serve straight from the source folders unless collectstatic was run for a deployment.
WHITENOISE_USE_FINDERS = env_bool("CAIRN_STATIC_FROM_SOURCE", not DATABASE_URL or DEBUG)
if WHITENOISE_USE_FINDERS:  # then STATIC_ROOT is only collectstatic's target: no folder yet
    warnings.filterwarnings("ignore", message=re.escape(f"No directory at: {STATIC_ROOT}"))
STORAGES = {
    "default": {"BACKEND": "django.core.files.storage.FileSystemStorage"},
    "staticfiles": {"BACKEND": "whitenoise.storage.CompressedStaticFilesStorage"},
}

# Blobs (uploaded files, derived tables, models): a local folder, content-addressed.
BLOB_ROOT = Path(os.environ.get("CAIRN_BLOB_ROOT", VAR_DIR / "blobs")).resolve()
STAGING_ROOT = Path(os.environ.get("CAIRN_STAGING_ROOT", VAR_DIR / "staging")).resolve()
# --- Where blobs are kept (portal.datasets.blobs) ------------------------------------------
# "local": the folder BLOB_ROOT (one machine). "s3": any S3-compatible object store, which
# workers on several machines share; keys are CAIRN_S3_PREFIX + the folder's layout
# (ab/cd/<sha256>). Without CAIRN_S3_ACCESS_KEY_ID the client's usual credential sources apply.
BLOB_STORE = os.environ.get("CAIRN_BLOB_STORE", "local").strip().lower()
if BLOB_STORE not in ("local", "s3"):
    raise ImproperlyConfigured(f"CAIRN_BLOB_STORE must be local or s3, got {BLOB_STORE!r}")
S3_ENDPOINT_URL = os.environ.get("CAIRN_S3_ENDPOINT_URL", "").strip() or None
S3_BUCKET = os.environ.get("CAIRN_S3_BUCKET", "").strip()
S3_PREFIX = os.environ.get("CAIRN_S3_PREFIX", "blobs/").strip().strip("/")
S3_PREFIX = f"{S3_PREFIX}/" if S3_PREFIX else ""
S3_REGION = os.environ.get("CAIRN_S3_REGION", "").strip() or "us-east-1"
S3_ACCESS_KEY_ID = os.environ.get("CAIRN_S3_ACCESS_KEY_ID", "").strip() or None
S3_SECRET_ACCESS_KEY = os.environ.get("CAIRN_S3_SECRET_ACCESS_KEY", "").strip() or None
# Multipart uploads send parts of this size (the protocol's minimum is 5 MiB); memory per
# upload stays about two parts.
S3_PART_BYTES = int(env_float("CAIRN_S3_PART_MB", 16) * 1024**2)
if BLOB_STORE == "s3" and not S3_BUCKET:
    raise ImproperlyConfigured("CAIRN_BLOB_STORE=s3 needs CAIRN_S3_BUCKET (and usually "
                               "CAIRN_S3_ENDPOINT_URL and the access key variables)")
if S3_PART_BYTES < 5 * 1024**2:
    raise ImproperlyConfigured("CAIRN_S3_PART_MB must be at least 5 (the smallest part an "
                               f"S3-compatible store accepts), got {S3_PART_BYTES / 1024**2:g}")
# --- end of blob store settings --------------------------------------------------------------
UPLOAD_MAX_BYTES = int(env_float("CAIRN_UPLOAD_MAX_BYTES", 50 * 1024**3))
# Browser uploads are streamed to staging by our own handler; keep Django's in-memory limit
# small so nothing else buffers a large body.
FILE_UPLOAD_MAX_MEMORY_SIZE = 1024 * 1024
DATA_UPLOAD_MAX_MEMORY_SIZE = 10 * 1024 * 1024
DATA_UPLOAD_MAX_NUMBER_FILES = 20_000

# Security: the secure defaults hold unless DEBUG; HTTPS settings follow CAIRN_HTTPS.
HTTPS = env_bool("CAIRN_HTTPS", not DEBUG and bool(DATABASE_URL))
SESSION_COOKIE_SECURE = HTTPS
CSRF_COOKIE_SECURE = HTTPS
SECURE_SSL_REDIRECT = HTTPS and env_bool("CAIRN_SSL_REDIRECT", True)
SECURE_HSTS_SECONDS = int(env_float("CAIRN_HSTS_SECONDS", 31536000 if HTTPS else 0))
SECURE_HSTS_INCLUDE_SUBDOMAINS = HTTPS
SECURE_HSTS_PRELOAD = HTTPS
SECURE_PROXY_SSL_HEADER = (
    ("HTTP_X_FORWARDED_PROTO", "https") if env_bool("CAIRN_BEHIND_PROXY", False) else None
)
SECURE_CONTENT_TYPE_NOSNIFF = True
SECURE_REFERRER_POLICY = "same-origin"
X_FRAME_OPTIONS = "DENY"
SESSION_COOKIE_HTTPONLY = True
SESSION_COOKIE_AGE = 60 * 60 * 12

# Log-in throttling: failures counted per account and per address within a window.
LOGIN_FAILURE_WINDOW_S = env_float("CAIRN_LOGIN_FAILURE_WINDOW_S", 15 * 60)
LOGIN_MAX_FAILURES_PER_ACCOUNT = int(env_float("CAIRN_LOGIN_MAX_FAILURES_PER_ACCOUNT", 5))
LOGIN_MAX_FAILURES_PER_ADDRESS = int(env_float("CAIRN_LOGIN_MAX_FAILURES_PER_ADDRESS", 20))

# --- The client's address behind proxies (portal.accounts.throttle.client_address) ---------
# How many proxies in front of the portal append to X-Forwarded-For. 0: the header is ignored
# and REMOTE_ADDR is the client; N: the N-th address from the right of the header is.
_trusted_proxies = os.environ.get("CAIRN_TRUSTED_PROXIES", "").strip() or "0"
if not _trusted_proxies.isdigit():
    raise ImproperlyConfigured("CAIRN_TRUSTED_PROXIES must be a whole number of proxies (0 or "
                               f"more), got {_trusted_proxies!r}")
TRUSTED_PROXIES = int(_trusted_proxies)
# --- end of the client's address block ------------------------------------------------------

# Celery: Redis in deployment, kombu's filesystem transport under var/ when unset.
CELERY_BROKER_URL = os.environ.get("CELERY_BROKER_URL", "")
if CELERY_BROKER_URL:
    CELERY_BROKER_TRANSPORT_OPTIONS = {}
else:
    # The folders are made when Celery first reads its configuration (portal.celery).
    BROKER_DIR = VAR_DIR / "broker"
    CELERY_BROKER_URL = "filesystem://"
    # kombu's filesystem transport with whole-message writes (portal/embedded/broker.py).
    CELERY_BROKER_TRANSPORT = "portal.embedded.broker:Transport"
    CELERY_BROKER_TRANSPORT_OPTIONS = {
        "data_folder_in": str(BROKER_DIR / "queue"),
        "data_folder_out": str(BROKER_DIR / "queue"),
        "processed_folder": str(BROKER_DIR / "processed"),
        "control_folder": str(BROKER_DIR / "control"),
        "store_processed": False,
    }
CELERY_TASK_ALWAYS_EAGER = False

# Jobs: the lease a running job holds and renews, and when the sweeper acts.
JOB_LEASE_S = env_float("CAIRN_JOB_LEASE_S", 60)
JOB_HEARTBEAT_S = env_float("CAIRN_JOB_HEARTBEAT_S", JOB_LEASE_S / 4)
JOB_RESEND_AFTER_S = env_float("CAIRN_JOB_RESEND_AFTER_S", 120)
JOB_SWEEP_EVERY_S = env_float("CAIRN_JOB_SWEEP_EVERY_S", 30)
JOB_MAX_ATTEMPTS = int(env_float("CAIRN_JOB_MAX_ATTEMPTS", 3))

# --- Failure states and leftovers -----------------------------------------------------------
# A job that meets a database or connection error is retried this many times (with back-off)
# before it fails; such retries never count as a stopped worker.
JOB_TRANSIENT_RETRIES = int(env_float("CAIRN_JOB_TRANSIENT_RETRIES", 5))
# A resumable upload that received no chunk for this long fails and its staged bytes go.
UPLOAD_ABANDONED_AFTER_S = env_float("CAIRN_UPLOAD_ABANDONED_AFTER_S", 2 * 86400)
# Bytes one site may hold in uploads still receiving, waiting or being validated.
SITE_STAGING_QUOTA_BYTES = int(env_float("CAIRN_SITE_STAGING_QUOTA_BYTES", 100 * 1024**3))
# --- end of failure states and leftovers ----------------------------------------------------

# The audit chain: how often its head is anchored outside the database, and verified.
AUDIT_ANCHOR_EVERY_S = env_float("CAIRN_AUDIT_ANCHOR_EVERY_S", 3600)
AUDIT_VERIFY_EVERY_S = env_float("CAIRN_AUDIT_VERIFY_EVERY_S", 86400)
# A process links its committed events after this many events or seconds, whichever first.
AUDIT_SEAL_EVERY_EVENTS = int(env_float("CAIRN_AUDIT_SEAL_EVERY_EVENTS", 32))
AUDIT_SEAL_EVERY_S = env_float("CAIRN_AUDIT_SEAL_EVERY_S", 2)

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": os.environ.get("CAIRN_LOG_LEVEL", "INFO")},
    "loggers": {"django.db.backends": {"level": "WARNING"}},
}
