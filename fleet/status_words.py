"""How each status is named and drawn. Words are ours; the shape is a three-dot urgency meter, so status never
rests on colour alone."""

from fleet.trend.status import STATUS_ORDER

STATUS_LABELS = {
    "past_limit": "Past limit",
    "due_soon": "Due soon",
    "watch": "Watch",
    "healthy": "Healthy",
}
STATUS_METER = {
    "past_limit": "●●●",
    "due_soon": "●●○",
    "watch": "●○○",
    "healthy": "○○○",
}
assert tuple(STATUS_LABELS) == STATUS_ORDER
