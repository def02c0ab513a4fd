"""Component ids shared across pages (page-specific ids live in each page, prefixed by it)."""

__all__ = ["NAV", "REFRESH", "URL", "USER_BADGE"]

URL = "app-url"
NAV = "app-nav"
REFRESH = "app-refresh"
USER_BADGE = "app-user"
