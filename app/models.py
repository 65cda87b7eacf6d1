"""Every domain's models, imported so that ``Base.metadata`` holds the whole schema.

Alembic (``migrations/env.py``) and the tests import this module; add one line per domain.
"""

from app.alerts.models import Alert, AlertRule, DailySummaryRecord, OutboxMessage
from app.auth.models import ApiKey
from app.batches.models import LarvalBatch
from app.db import Base
from app.readings.models import Reading
from app.samples.models import LabSample
from app.sites.models import Device, Site, Station, Tank
from app.status.rollups import ReadingRollup

__all__ = [
    "Alert",
    "AlertRule",
    "ApiKey",
    "Base",
    "DailySummaryRecord",
    "Device",
    "LabSample",
    "LarvalBatch",
    "OutboxMessage",
    "Reading",
    "ReadingRollup",
    "Site",
    "Station",
    "Tank",
]
