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
STATUS_MEANING = {
    "past_limit": "a limit is crossed now",
    "due_soon": "a limit is expected inside the planning horizon (the pump's own trend)",
    "watch": "something needs a look: fast decline, a jump in case drain, hot or dirty oil, an overdue reading, "
             "a late lab result, or too little data",
    "healthy": "no limit expected inside the planning horizon",
}
assert tuple(STATUS_LABELS) == STATUS_ORDER
