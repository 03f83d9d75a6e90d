"""Beamledger settings, read from the environment (see README "Configuration").

Defaults make a fresh clone run: SQLite under var/, media under var/media, background jobs in-process.
Production sets DATABASE_URL, CELERY_BROKER_URL and SECRET_KEY, with DEBUG off.
"""

from __future__ import annotations

from pathlib import Path

from celery.schedules import crontab
from django.core.exceptions import ImproperlyConfigured

from facility.config import Config

BASE_DIR = Path(__file__).resolve().parent.parent
VAR_DIR = BASE_DIR / "var"
env = Config()

DEBUG = env.bool("DEBUG", True)
_DEV_SECRET = "dev-only-insecure-key-never-use-in-production"
if DEBUG:
    SECRET_KEY = env.str("SECRET_KEY", _DEV_SECRET)
else:
    SECRET_KEY = env.str("SECRET_KEY", "")
    if len(SECRET_KEY) < 32 or SECRET_KEY == _DEV_SECRET:
        raise ImproperlyConfigured(
            "Setting SECRET_KEY must be a random string of at least 32 characters when DEBUG is off."
        )
ALLOWED_HOSTS = env.list("ALLOWED_HOSTS", ["127.0.0.1", "localhost", "testserver"])
CSRF_TRUSTED_ORIGINS = env.list("CSRF_TRUSTED_ORIGINS", [])

INSTALLED_APPS = [
    "django.contrib.admin",
    "django.contrib.auth",
    "django.contrib.contenttypes",
    "django.contrib.sessions",
    "django.contrib.messages",
    "django.contrib.staticfiles",
    "django.contrib.postgres",
    "rest_framework",
    "django_filters",
    "drf_spectacular",
    "simple_history",
    "facility.people",
    "facility.instruments",
    "facility.bookings",
    "facility.logbook",
    "facility.billing",
    "facility.upkeep",
    "facility.demo",
    "api",
]

MIDDLEWARE = [
    "django.middleware.security.SecurityMiddleware",
    "whitenoise.middleware.WhiteNoiseMiddleware",
    "django.contrib.sessions.middleware.SessionMiddleware",
    "django.middleware.common.CommonMiddleware",
    "django.middleware.csrf.CsrfViewMiddleware",
    "django.contrib.auth.middleware.AuthenticationMiddleware",
    "django.contrib.messages.middleware.MessageMiddleware",
    "django.middleware.clickjacking.XFrameOptionsMiddleware",
    "simple_history.middleware.HistoryRequestMiddleware",
]

ROOT_URLCONF = "facility.urls"
WSGI_APPLICATION = "facility.wsgi.application"

TEMPLATES = [
    {
        "BACKEND": "django.template.backends.django.DjangoTemplates",
        "DIRS": [BASE_DIR / "templates"],
        "APP_DIRS": True,
        "OPTIONS": {
            "context_processors": [
                "django.template.context_processors.request",
                "django.contrib.auth.context_processors.auth",
                "django.contrib.messages.context_processors.messages",
            ]
        },
    }
]

# --- Database -------------------------------------------------------------------------------
VAR_DIR.mkdir(exist_ok=True)
DATABASES = {"default": env.db("DATABASE_URL", f"sqlite:///{VAR_DIR / 'beamledger.sqlite3'}")}
if DATABASES["default"]["ENGINE"] == "django.db.backends.sqlite3":
    # WAL lets readers work while one writer writes; IMMEDIATE takes the write lock when a
    # transaction starts, so the booking overlap check and its insert cannot interleave.
    DATABASES["default"].setdefault("OPTIONS", {}).update(
        {
            "transaction_mode": "IMMEDIATE",
            "timeout": 20,
            "init_command": "PRAGMA journal_mode=WAL; PRAGMA synchronous=NORMAL;",
        }
    )
DATABASES["default"]["ATOMIC_REQUESTS"] = False
DATABASES["default"].setdefault("CONN_MAX_AGE", env.int("CONN_MAX_AGE", 0, minimum=0))
DEFAULT_AUTO_FIELD = "django.db.models.BigAutoField"

AUTH_PASSWORD_VALIDATORS = [
    {"NAME": "django.contrib.auth.password_validation.UserAttributeSimilarityValidator"},
    {"NAME": "django.contrib.auth.password_validation.MinimumLengthValidator"},
    {"NAME": "django.contrib.auth.password_validation.CommonPasswordValidator"},
]
LOGIN_URL = "login"
LOGIN_REDIRECT_URL = "home"
LOGOUT_REDIRECT_URL = "login"

# --- Time ----------------------------------------------------------------------------------
LANGUAGE_CODE = "en-gb"
TIME_ZONE = env.timezone("TIME_ZONE", "UTC")
USE_I18N = True
USE_TZ = True

# --- Files ---------------------------------------------------------------------------------
STATIC_URL = "static/"
STATIC_ROOT = Path(env.str("STATIC_ROOT", str(VAR_DIR / "static")))
STATICFILES_DIRS = [BASE_DIR / "static"] if (BASE_DIR / "static").is_dir() else []
MEDIA_URL = "media/"
MEDIA_ROOT = Path(env.str("MEDIA_ROOT", str(VAR_DIR / "media")))
STORAGE_BACKEND = env.str("STORAGE_BACKEND", "local")
if STORAGE_BACKEND == "local":
    _media_storage = {"BACKEND": "django.core.files.storage.FileSystemStorage"}
elif STORAGE_BACKEND == "s3":
    # S3-compatible object storage through django-storages; every worker reads the same bucket.
    _media_storage = {
        "BACKEND": "storages.backends.s3.S3Storage",
        "OPTIONS": {
            "bucket_name": env.str("S3_BUCKET"),
            "endpoint_url": env.str("S3_ENDPOINT_URL", "") or None,
            "access_key": env.str("S3_ACCESS_KEY", "") or None,
            "secret_key": env.str("S3_SECRET_KEY", "") or None,
            "default_acl": None,
            "file_overwrite": False,
        },
    }
else:
    raise ImproperlyConfigured(
        f"Setting STORAGE_BACKEND={STORAGE_BACKEND!r} is not valid: expected local or s3."
    )
STORAGES = {
    "default": _media_storage,
    "staticfiles": {"BACKEND": "django.contrib.staticfiles.storage.StaticFilesStorage"},
}
# Uploads larger than this go to a temporary file rather than memory.
FILE_UPLOAD_MAX_MEMORY_SIZE = 10 * 1024 * 1024
DATA_UPLOAD_MAX_MEMORY_SIZE = 10 * 1024 * 1024

# --- E-mail --------------------------------------------------------------------------------
globals().update(env.email("EMAIL_URL", "consolemail://"))
DEFAULT_FROM_EMAIL = env.str("DEFAULT_FROM_EMAIL", "beamledger@localhost")

# --- Background jobs -----------------------------------------------------------------------
CELERY_BROKER_URL = env.str("CELERY_BROKER_URL", "")
# Without a broker the jobs run in-process, so a fresh clone needs no Redis.
CELERY_TASK_ALWAYS_EAGER = not CELERY_BROKER_URL
CELERY_TASK_EAGER_PROPAGATES = True
CELERY_RESULT_BACKEND = env.str("CELERY_RESULT_BACKEND", "") or None
CELERY_TASK_SERIALIZER = "json"
CELERY_RESULT_SERIALIZER = "json"
CELERY_ACCEPT_CONTENT = ["json"]
CELERY_TASK_ACKS_LATE = True
CELERY_TASK_REJECT_ON_WORKER_LOST = True
CELERY_WORKER_PREFETCH_MULTIPLIER = 1
CELERY_TASK_SOFT_TIME_LIMIT = env.int("CELERY_TASK_SOFT_TIME_LIMIT", 120, minimum=1)
CELERY_TASK_TIME_LIMIT = env.int("CELERY_TASK_TIME_LIMIT", 180, minimum=1)
CELERY_TIMEZONE = TIME_ZONE
# Periodic jobs (run by `celery -A facility beat`); each task stays thin and calls a service.
CELERY_BEAT_SCHEDULE: dict = {
    "requeue-stale-micrographs": {
        "task": "facility.logbook.tasks.requeue_stale_micrographs",
        "schedule": 600.0,
    },
    "draft-previous-month": {
        "task": "facility.billing.tasks.draft_previous_month",
        "schedule": crontab(minute=0, hour=2, day_of_month=1),
    },
    "check-upkeep-limits": {
        "task": "facility.upkeep.tasks.check_limits",
        "schedule": crontab(minute=0, hour=6),
    },
}

# --- REST API ------------------------------------------------------------------------------
REST_FRAMEWORK = {
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "rest_framework.authentication.SessionAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["rest_framework.permissions.IsAuthenticated"],
    "DEFAULT_SCHEMA_CLASS": "drf_spectacular.openapi.AutoSchema",
}
SPECTACULAR_SETTINGS = {
    "TITLE": "Beamledger API",
    "DESCRIPTION": "Bookings, sessions, images, flags and usage of an electron-microscopy facility.",
    "VERSION": "1",
    "SERVE_INCLUDE_SCHEMA": False,
}

# --- Facility rules ------------------------------------------------------------------------
FACILITY_NAME = env.str("FACILITY_NAME", "Beamledger facility")
UPLOAD_MAX_PIXELS = env.int("UPLOAD_MAX_PIXELS", 400_000_000, minimum=1)
UPLOAD_MAX_BYTES = env.int("UPLOAD_MAX_BYTES", 500 * 1024 * 1024, minimum=1)

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": env.str("LOG_LEVEL", "INFO")},
}
