"""European options: pricing models, validation of option rows, option books."""

from .book import MIN_VOL, SENSITIVITY_COLUMNS, HeldOptions, OptionBook, build_book
from .pricing import (
    CALENDAR_DAYS_PER_TRADING_DAY,
    DAYS_PER_YEAR,
    MODEL_BLACK76,
    MODEL_BSM,
    MODEL_GK,
    MODELS,
    Greeks,
    black76_price,
    bsm_price,
    carry_yield,
    garman_kohlhagen_price,
    horizon_calendar_days,
    option_greeks,
    option_price,
    year_fraction,
)
from .specs import OPTION_COLUMNS, OptionSpecs, is_option_row, model_for_underlying, validate_option_rows

__all__ = [
    "MIN_VOL", "SENSITIVITY_COLUMNS", "HeldOptions", "OptionBook", "build_book",
    "CALENDAR_DAYS_PER_TRADING_DAY", "DAYS_PER_YEAR", "MODEL_BLACK76", "MODEL_BSM", "MODEL_GK", "MODELS",
    "Greeks", "black76_price", "bsm_price", "carry_yield", "garman_kohlhagen_price", "horizon_calendar_days",
    "option_greeks", "option_price", "year_fraction",
    "OPTION_COLUMNS", "OptionSpecs", "is_option_row", "model_for_underlying", "validate_option_rows",
]
