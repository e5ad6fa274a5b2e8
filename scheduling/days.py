"""Times in the life engine: float days since 1970-01-01, and the calendar."""

import datetime as dt

import numpy as np

DAYS_PER_YEAR = 365.25
HOURS_PER_YEAR = 8766.0
#: Hours in each calendar month of an average year (February 28.25 days).
MONTH_HOURS = np.array([31, 28.25, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31], dtype=float) * 24.0


def day_to_date(day):
    return dt.date(1970, 1, 1) + dt.timedelta(days=int(np.floor(day)))


def date_to_day(date):
    return float((date - dt.date(1970, 1, 1)).days)
