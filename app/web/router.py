"""Page routes: sign in with a key, the site overview, a day's status, charts, samples.

The pages show what the API serves: the overview and the day page render
:func:`app.status.service.site_status`, the same function behind
``GET /api/v1/sites/{site_id}/status``.
"""

from __future__ import annotations

import datetime as dt
import hmac
import secrets
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

from fastapi import APIRouter, Form, HTTPException, Request, status
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates
from pydantic import ValidationError
from sqlalchemy import func, select
from sqlalchemy.orm import Session

import chemistry
from app.alerts import rules as alert_rules
from app.alerts.models import Alert, OutboxMessage
from app.auth.dependencies import Principal
from app.auth.keys import find_active_key
from app.auth.models import ApiKey
from app.db import SessionDep, utcnow
from app.errors import no_site, site_has_no
from app.readings.models import Reading
from app.samples import service as samples_service
from app.samples.drift import record_sample
from app.samples.schemas import LabSampleCreate
from app.sites import service as sites_service
from app.sites.models import Site, Station, Tank
from app.status.compute import DEFAULT_MAX_GAP
from app.status.days import StatusDayError, check_status_day, site_today
from app.status.service import QC_FAIL, omega_at_temperature, site_status
from app.validation_sentences import find_field, problem_sentence
from app.web.charts import Series, omega_week_svg

TEMPLATES = Jinja2Templates(directory=Path(__file__).resolve().parent.parent / "templates")
PAGE_ROLES = ("admin", "viewer")
CHART_DAYS = 7

router = APIRouter(include_in_schema=False)


# --------------------------------------------------------------------------------------
# formatting helpers for the templates
# --------------------------------------------------------------------------------------


def _number(value: Any, digits: int = 2) -> str:
    if value is None:
        return "–"
    return f"{float(value):.{digits}f}"


def _percent(value: Any) -> str:
    return "–" if value is None else f"{float(value):.0f} %"


def _local_time(value: Any, timezone: str, fmt: str = "%a %d %b %H:%M") -> str:
    if value is None:
        return "–"
    if isinstance(value, str):
        value = dt.datetime.fromisoformat(value)
    return value.astimezone(ZoneInfo(timezone)).strftime(fmt)


def _age(minutes: float | None) -> str:
    if minutes is None:
        return "–"
    if minutes < 90:
        return f"{minutes:.0f} min"
    if minutes < 48 * 60:
        return f"{minutes / 60:.1f} h"
    return f"{minutes / 1440:.1f} days"


TEMPLATES.env.filters["num"] = _number
TEMPLATES.env.filters["pct"] = _percent
TEMPLATES.env.filters["local"] = _local_time
TEMPLATES.env.filters["age"] = _age


# --------------------------------------------------------------------------------------
# sign-in and the form token
# --------------------------------------------------------------------------------------


def _principal(request: Request, session: Session) -> Principal | None:
    key_id = request.session.get("key_id")
    if key_id is None:
        return None
    api_key = session.get(ApiKey, key_id)
    if api_key is None or api_key.revoked_at is not None or api_key.role not in PAGE_ROLES:
        request.session.clear()
        return None
    return Principal(role=api_key.role, key_id=api_key.id, label=api_key.label)


def _form_token(request: Request) -> str:
    token = request.session.get("form_token")
    if token is None:
        token = secrets.token_urlsafe(24)
        request.session["form_token"] = token
    return token


def _check_form_token(request: Request, token: str) -> None:
    expected = request.session.get("form_token")
    if not expected or not hmac.compare_digest(expected, token):
        raise HTTPException(
            status.HTTP_403_FORBIDDEN,
            "The form is out of date or did not come from this site; reload the page and "
            "try again.",
        )


def _to_sign_in() -> RedirectResponse:
    return RedirectResponse("/sign-in", status_code=status.HTTP_303_SEE_OTHER)


def _render(request: Request, name: str, principal: Principal | None, *,
            status_code: int = 200, **context: Any) -> HTMLResponse:
    return TEMPLATES.TemplateResponse(
        request,
        name,
        {
            "principal": principal,
            "form_token": _form_token(request),
            "caution": chemistry.DOSING_CAUTION,
            **context,
        },
        status_code=status_code,
    )


@router.get("/sign-in", response_class=HTMLResponse)
def sign_in_page(request: Request) -> HTMLResponse:
    return _render(request, "sign_in.html", None, error=None)


@router.post("/sign-in", response_class=HTMLResponse)
def sign_in(request: Request, session: SessionDep, key: str = Form(...)) -> Response:
    api_key = find_active_key(session=session, plaintext=key.strip())
    if api_key is None or api_key.role not in PAGE_ROLES:
        return _render(
            request, "sign_in.html", None, status_code=status.HTTP_401_UNAUTHORIZED,
            error="That key is unknown, revoked, or a device key. Use an admin or viewer key.",
        )
    request.session.clear()
    request.session["key_id"] = api_key.id
    return RedirectResponse("/", status_code=status.HTTP_303_SEE_OTHER)


@router.post("/sign-out")
def sign_out(request: Request) -> RedirectResponse:
    request.session.clear()
    return _to_sign_in()


# --------------------------------------------------------------------------------------
# pages
# --------------------------------------------------------------------------------------


def _site_or_404(session: Session, site_id: str) -> Site:
    site = sites_service.get_site(session=session, site_id=site_id)
    if site is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, no_site(site_id))
    return site


@router.get("/", response_class=HTMLResponse)
def home(request: Request, session: SessionDep) -> Response:
    principal = _principal(request, session)
    if principal is None:
        return _to_sign_in()
    sites = sites_service.list_sites(session=session)
    if len(sites) == 1:
        return RedirectResponse(f"/sites/{sites[0].id}", status_code=status.HTTP_303_SEE_OTHER)
    return _render(request, "home.html", principal, sites=sites)


def _status_page(request: Request, session: Session, principal: Principal, site: Site,
                 day: dt.date | None, template: str) -> HTMLResponse:
    now = utcnow()
    report = site_status(session=session, site=site, day=day, now=now)
    day_shown: dt.date = report["date"]
    return _render(
        request,
        template,
        principal,
        site=site,
        report=report,
        previous_day=day_shown - dt.timedelta(days=1),
        next_day=day_shown + dt.timedelta(days=1),
        today=now.astimezone(ZoneInfo(site.timezone)).date(),
        chart_version=int(now.timestamp() // 300),
        failed_mail=session.scalar(
            select(func.count(OutboxMessage.id)).where(
                OutboxMessage.site_id == site.id, OutboxMessage.status == "failed"
            )
        ),
    )


@router.get("/sites/{site_id}", response_class=HTMLResponse)
def site_overview(request: Request, site_id: str, session: SessionDep) -> Response:
    principal = _principal(request, session)
    if principal is None:
        return _to_sign_in()
    site = _site_or_404(session, site_id)
    return _status_page(request, session, principal, site, None, "site.html")


@router.get("/sites/{site_id}/days/{day}", response_class=HTMLResponse)
def day_page(request: Request, site_id: str, day: str, session: SessionDep) -> Response:
    principal = _principal(request, session)
    if principal is None:
        return _to_sign_in()
    site = _site_or_404(session, site_id)
    now = utcnow()
    today = site_today(site.timezone, now)
    try:
        local_day = dt.date.fromisoformat(day)
    except ValueError:
        problem = f"{day!r} is not a date; write it as YYYY-MM-DD, for example {today}."
        return _render(request, "day_refused.html", principal, site=site, today=today,
                       problem=problem, status_code=status.HTTP_422_UNPROCESSABLE_CONTENT)
    try:
        check_status_day(local_day, timezone=site.timezone, now=now)
    except StatusDayError as error:
        return _render(request, "day_refused.html", principal, site=site, today=today,
                       problem=f"There is no status for {local_day}: {error}",
                       status_code=status.HTTP_422_UNPROCESSABLE_CONTENT)
    return _status_page(request, session, principal, site, local_day, "day.html")


@router.post("/sites/{site_id}/alerts/{alert_id}/acknowledge")
def acknowledge(
    request: Request, site_id: str, alert_id: int, session: SessionDep,
    form_token: str = Form(...),
) -> Response:
    principal = _principal(request, session)
    if principal is None:
        return _to_sign_in()
    _check_form_token(request, form_token)
    alert = session.get(Alert, alert_id)
    if alert is None or alert.site_id != site_id:
        raise HTTPException(status.HTTP_404_NOT_FOUND, site_has_no(site_id, "alert", alert_id))
    try:
        alert_rules.acknowledge_alert(
            session=session, alert=alert, who=f"{principal.label} (key {principal.key_id}, web)"
        )
    except alert_rules.RuleInputError as error:
        session.rollback()
        raise HTTPException(status.HTTP_409_CONFLICT, str(error)) from None
    session.commit()
    return RedirectResponse(f"/sites/{site_id}#alerts", status_code=status.HTTP_303_SEE_OTHER)


@router.get("/sites/{site_id}/stations/{station_id}/chart.svg")
def station_chart(request: Request, site_id: str, station_id: str, session: SessionDep
                  ) -> Response:
    if _principal(request, session) is None:
        raise HTTPException(status.HTTP_401_UNAUTHORIZED, "Sign in to see charts.")
    site = _site_or_404(session, site_id)
    station = sites_service.get_station(session=session, site_id=site_id, station_id=station_id)
    if station is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, site_has_no(site_id, "station", station_id))
    end = utcnow()
    start = end - dt.timedelta(days=CHART_DAYS)
    readings = list(
        session.scalars(
            select(Reading)
            .where(Reading.station_pk == station.pk, Reading.observed_at >= start,
                   Reading.observed_at < end)
            .order_by(Reading.observed_at)
        )
    )
    tanks = _tanks_for_chart(session, site, station)
    good = [r for r in readings if r.qc_overall != QC_FAIL and r.omega_aragonite is not None]
    series = []
    for temperature in sorted({float(t.culture_temperature_c) for t in tanks}):
        times, omega = omega_at_temperature(site=site, readings=readings,
                                            temperature_c=temperature)
        series.append(Series(f"at tank temperature {temperature:g} °C", times, list(omega)))
    floors = sorted({float(t.omega_floor) for t in tanks})
    svg = omega_week_svg(
        title=f"{station.name}: omega aragonite, last {CHART_DAYS} days",
        in_situ=Series("in situ", [r.observed_at for r in good],
                       [r.omega_aragonite for r in good]),
        at_tank_temperature=series,
        floors=[(f"tank floor {f:g}", f) for f in floors],
        start=start,
        end=end,
        timezone=site.timezone,
        max_gap=DEFAULT_MAX_GAP,
    )
    return Response(svg, media_type="image/svg+xml",
                    headers={"Cache-Control": "private, max-age=300"})


def _tanks_for_chart(session: Session, site: Site, station: Station) -> list[Tank]:
    """Tanks fed by the station; for an intake feeding none directly, all the site's tanks
    (its water reaches them after treatment)."""
    tanks = list(session.scalars(select(Tank).where(Tank.site_id == site.id)))
    fed = [t for t in tanks if t.source_station_pk == station.pk]
    if fed or station.role != "intake":
        return fed
    return tanks


@router.get("/sites/{site_id}/stations/{station_id}/samples/new", response_class=HTMLResponse)
def sample_form(request: Request, site_id: str, station_id: str, session: SessionDep
                ) -> Response:
    principal = _principal(request, session)
    if principal is None:
        return _to_sign_in()
    site = _site_or_404(session, site_id)
    station = sites_service.get_station(session=session, site_id=site_id, station_id=station_id)
    if station is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, site_has_no(site_id, "station", station_id))
    return _sample_page(request, session, principal, site, station, errors=[], saved=None,
                        values={})


def _sample_page(request: Request, session: Session, principal: Principal, site: Site,
                 station: Station, *, errors: list[str], saved: Any, values: dict[str, str],
                 status_code: int = 200) -> HTMLResponse:
    samples = samples_service.list_samples(session=session, station=station)[-20:]
    return _render(request, "sample_form.html", principal, site=site, station=station,
                   errors=errors, saved=saved, values=values, samples=list(reversed(samples)),
                   status_code=status_code)


SAMPLE_FIELDS = ("collected_at", "salinity", "temperature_c", "alkalinity_umol_kg",
                 "dic_umol_kg", "ph", "ph_scale", "method", "notes")


@router.post("/sites/{site_id}/stations/{station_id}/samples/new", response_class=HTMLResponse)
async def save_sample(request: Request, site_id: str, station_id: str, session: SessionDep
                      ) -> Response:
    principal = _principal(request, session)
    if principal is None:
        return _to_sign_in()
    form = await request.form()
    _check_form_token(request, str(form.get("form_token", "")))
    site = _site_or_404(session, site_id)
    station = sites_service.get_station(session=session, site_id=site_id, station_id=station_id)
    if station is None:
        raise HTTPException(status.HTTP_404_NOT_FOUND, site_has_no(site_id, "station", station_id))
    values = {name: str(form.get(name, "")).strip() for name in SAMPLE_FIELDS}
    if principal.role != "admin":
        return _sample_page(request, session, principal, site, station, values=values,
                            saved=None,
                            errors=["Only an admin key may record samples; nothing was saved."],
                            status_code=403)
    data = {k: v for k, v in values.items() if v != ""}
    if "collected_at" in data:
        # The form's datetime-local field has no offset: it is the site's local time.
        try:
            naive = dt.datetime.fromisoformat(data["collected_at"])
        except ValueError:
            naive = None
        if naive is not None and naive.tzinfo is None:
            data["collected_at"] = naive.replace(tzinfo=ZoneInfo(site.timezone)).isoformat()
    try:
        body = LabSampleCreate.model_validate(data)
    except ValidationError as error:
        messages = [
            problem_sentence(e, find_field(LabSampleCreate, list(e["loc"])))
            for e in error.errors()
        ]
        return _sample_page(request, session, principal, site, station, values=values,
                            saved=None, errors=messages, status_code=422)
    try:
        sample = record_sample(
            session=session, site=site, station=station, data=body, now=utcnow()
        )
    except samples_service.SampleConflictError as error:
        return _sample_page(request, session, principal, site, station, values=values,
                            saved=None, errors=[str(error)], status_code=409)
    session.commit()
    return _sample_page(request, session, principal, site, station, values={}, saved=sample,
                        errors=[])
