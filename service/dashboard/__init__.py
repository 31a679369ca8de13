"""The browser dashboard: HTML shells and assets (``pages``) and the arrays its plots need
(``data``, under ``/v1/dashboard``, token required)."""

from service.dashboard.data import router as data_router
from service.dashboard.pages import PAGE_HEADERS, PAGE_PATHS
from service.dashboard.pages import router as page_router

__all__ = ["PAGE_HEADERS", "PAGE_PATHS", "data_router", "page_router"]
