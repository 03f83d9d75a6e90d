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
    "drf_spectacular_sidecar",
    "simple_history",
    "facility.people",
    "facility.instruments",
    "facility.bookings",
    "facility.logbook",
    "facility.billing",
    "facility.upkeep",
    "facility.finder",
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

# --- Cache (API throttles) --------------------------------------------------------------------
# In production point this at Redis so that throttle counts hold across gunicorn workers.
CACHES = {"default": env.cache("CACHE_URL", "locmemcache://")}

# --- Time ----------------------------------------------------------------------------------
LANGUAGE_CODE = "en-gb"
TIME_ZONE = env.timezone("TIME_ZONE", "UTC")
USE_I18N = True
USE_TZ = True

# --- Files ---------------------------------------------------------------------------------
STATIC_URL = "static/"
STATIC_ROOT = Path(env.str("STATIC_ROOT", str(VAR_DIR / "static")))
# Served by whitenoise; in development it finds files in static/ without collectstatic.
WHITENOISE_USE_FINDERS = DEBUG
WHITENOISE_AUTOREFRESH = DEBUG
if DEBUG:
    STATIC_ROOT.mkdir(parents=True, exist_ok=True)  # whitenoise warns about a missing root
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
    # Token first: its WWW-Authenticate header makes a request without credentials a 401.
    "DEFAULT_AUTHENTICATION_CLASSES": [
        "api.authentication.TokenAuthentication",
        "rest_framework.authentication.SessionAuthentication",
    ],
    "DEFAULT_PERMISSION_CLASSES": ["api.permissions.HasScope"],
    "DEFAULT_PARSER_CLASSES": ["rest_framework.parsers.JSONParser"],
    "DEFAULT_RENDERER_CLASSES": ["rest_framework.renderers.JSONRenderer"],
    "DEFAULT_PAGINATION_CLASS": "api.pagination.Cursor",
    "DEFAULT_SCHEMA_CLASS": "api.schema.ApiAutoSchema",
    "EXCEPTION_HANDLER": "api.errors.exception_handler",
    "DEFAULT_METADATA_CLASS": "api.metadata.PointToSchema",
    "DEFAULT_THROTTLE_CLASSES": [],
    # Per token (or per person when signed in); the cache is the default one, so with several
    # web processes give Django a shared cache (Redis) for the limits to hold across them.
    "DEFAULT_THROTTLE_RATES": {
        "token_creation": env.str("API_TOKEN_CREATION_RATE", "20/hour"),
        "uploads": env.str("API_UPLOAD_RATE", "3600/hour"),
    },
    "UNAUTHENTICATED_USER": "django.contrib.auth.models.AnonymousUser",
}
SPECTACULAR_SETTINGS = {
    "TITLE": "Beamledger API",
    "DESCRIPTION": (
        "Bookings, sessions, images, flags and usage of an electron-microscopy facility. "
        "Authenticate with `Authorization: Bearer <token>` (make tokens on your token page) or "
        "with the pages' login session. Every error has the shape "
        '`{"error": {"code", "message", "fields"}}`.'
    ),
    "VERSION": "1",
    "SERVE_INCLUDE_SCHEMA": False,
    # The schema is no secret: scripts' authors read it before they hold a token.
    "SERVE_PERMISSIONS": ["rest_framework.permissions.AllowAny"],
    "SERVE_AUTHENTICATION": [],
    "COMPONENT_SPLIT_REQUEST": True,
    "SCHEMA_PATH_PREFIX": "/api/v1",
    # The docs page's scripts and styles come from the installed sidecar package, not a CDN, so
    # it works on a facility network without internet.
    "SWAGGER_UI_DIST": "SIDECAR",
    "SWAGGER_UI_FAVICON_HREF": "SIDECAR",
    "REDOC_DIST": "SIDECAR",
    "ENUM_NAME_OVERRIDES": {
        "InstrumentKindEnum": "facility.instruments.models.InstrumentKind",
        "AccountKindEnum": "facility.people.models.AccountKind",
        "TokenKindEnum": "api.models.TokenKind",
        "BookingStateEnum": "facility.bookings.models.BookingState",
        "AnalysisStateEnum": "facility.logbook.models.AnalysisState",
        "InstrumentStateEnum": "facility.logbook.instrument_state.STATES",
        "VacuumModeEnum": "facility.instruments.models.VacuumMode",
    },
}

# --- Facility rules ------------------------------------------------------------------------
FACILITY_NAME = env.str("FACILITY_NAME", "Beamledger facility")
UPLOAD_MAX_PIXELS = env.int("UPLOAD_MAX_PIXELS", 400_000_000, minimum=1)
UPLOAD_MAX_BYTES = env.int("UPLOAD_MAX_BYTES", 500 * 1024 * 1024, minimum=1)

# --- Image analysis and session flags ------------------------------------------------------
# Thresholds of the image flags (facility.micrograph.assess.AssessSettings field names).
ANALYSIS_THRESHOLDS = {
    "low_resolution_px": env.float("FLAG_LOW_RESOLUTION_PX", 4.0, minimum=0.5),
    "astigmatism_ratio": env.float("FLAG_ASTIGMATISM_RATIO", 1.5, minimum=1.0),
    "charging_score": env.float("FLAG_CHARGING_SCORE", 0.5, minimum=0.0),
}
# A coating thinner than this does not count against charging (common practice, no source).
CHARGING_MIN_COATING_NM = env.float("CHARGING_MIN_COATING_NM", 2.0, minimum=0.0)
# Second crossover energy E2 (keV) assumed by material class when the specimen gives none.
# Polymers ~1.5 and oxides/glasses ~3 (DOMAIN.md, after Joy & Joy, Micron 27 (1996) 247);
# semiconductors 2.6 (GaAs in the same table); biological and composite taken as polymer-like
# (from memory). Metals conduct and are not checked.
DEFAULT_E2_KEV = {
    "polymer": env.float("DEFAULT_E2_POLYMER_KEV", 1.5, minimum=0.1),
    "biological": env.float("DEFAULT_E2_BIOLOGICAL_KEV", 1.5, minimum=0.1),
    "composite": env.float("DEFAULT_E2_COMPOSITE_KEV", 1.5, minimum=0.1),
    "ceramic": env.float("DEFAULT_E2_CERAMIC_KEV", 3.0, minimum=0.1),
    "mineral": env.float("DEFAULT_E2_MINERAL_KEV", 3.0, minimum=0.1),
    "semiconductor": env.float("DEFAULT_E2_SEMICONDUCTOR_KEV", 2.6, minimum=0.1),
}
# Warn when the coating is thicker than this share of the feature size of interest: a ~10 nm
# sputtered layer hides features of about that size (trade).
COATING_FEATURE_RATIO = env.float("COATING_FEATURE_RATIO", 0.2, minimum=0.0)
# Logged and embedded numbers that differ by more than this share are a mismatch.
METADATA_MISMATCH_TOLERANCE = env.float("METADATA_MISMATCH_TOLERANCE", 0.05, minimum=0.0)
# Micrographs still pending after this long are queued again (a lost message).
ANALYSIS_STALE_MINUTES = env.int("ANALYSIS_STALE_MINUTES", 15, minimum=1)
ANALYSIS_MAX_ATTEMPTS = env.int("ANALYSIS_MAX_ATTEMPTS", 5, minimum=1)

# --- Billing -------------------------------------------------------------------------------
BILLING_CURRENCY = env.str("BILLING_CURRENCY", "EUR")
if not (len(BILLING_CURRENCY) == 3 and BILLING_CURRENCY.isalpha() and BILLING_CURRENCY.isupper()):
    raise ImproperlyConfigured(
        f"Setting BILLING_CURRENCY={BILLING_CURRENCY!r} is not valid: expected an ISO 4217 code "
        "such as EUR."
    )
# Lines under the facility name on printed statements (address, tax number), separated by ";".
BILLING_HEADER_LINES = [
    line.strip() for line in env.str("BILLING_HEADER_LINES", "").split(";") if line.strip()
]
BILLING_PAYMENT_NOTE = env.str("BILLING_PAYMENT_NOTE", "")

# --- Upkeep --------------------------------------------------------------------------------
# Alert staff when a counter is forecast to reach its limit within this many days.
UPKEEP_FORECAST_ALERT_DAYS = env.int("UPKEEP_FORECAST_ALERT_DAYS", 30, minimum=0)

LOGGING = {
    "version": 1,
    "disable_existing_loggers": False,
    "handlers": {"console": {"class": "logging.StreamHandler"}},
    "root": {"handlers": ["console"], "level": env.str("LOG_LEVEL", "INFO")},
}
