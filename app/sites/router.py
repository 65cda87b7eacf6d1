"""Sites, stations, tanks and devices over HTTP (filled in by the next commit)."""

from fastapi import APIRouter

router = APIRouter(tags=["sites"])
