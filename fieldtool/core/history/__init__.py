"""Board histories: records per board in JSON Lines files, sessions, merging and the fleet.

The store itself (``store``: append, read, names and places), the events a history holds
(``events``), the stored line's envelope (``records``) and the low-level file operations
(``files``) are re-exported here; ``sessions``, ``merge``, ``fleet`` and ``fleet_cache`` are
imported from their own modules.
"""

from fieldtool.core.history.events import (
    EVENT_TYPES,
    OUTCOMES,
    SCHEMAS,
    UNSETTLED,
    Action,
    BadNameError,
    DiagnosisSnapshot,
    Event,
    HistoryError,
    NotFoundError,
    Reading,
    SaveError,
    SessionClosed,
    SessionOpened,
    SnapshotSuspect,
    Verification,
    event_fields,
    event_from_fields,
    measurement_from_v1,
    schema_for,
)
from fieldtool.core.history.records import (
    BoardHistory,
    Damaged,
    Record,
    loads_line,
    parse_lines,
    parse_record,
    record_id_time,
)
from fieldtool.core.history.store import (
    ENV_VAR,
    append,
    append_many,
    board_files,
    board_path,
    check_name,
    read_board,
    read_file,
    resolve_logs_dir,
)
from fieldtool.core.times import format_time, now_utc, time_key

__all__ = [
    "ENV_VAR",
    "EVENT_TYPES",
    "OUTCOMES",
    "SCHEMAS",
    "UNSETTLED",
    "Action",
    "BadNameError",
    "BoardHistory",
    "Damaged",
    "DiagnosisSnapshot",
    "Event",
    "HistoryError",
    "NotFoundError",
    "Reading",
    "Record",
    "SaveError",
    "SessionClosed",
    "SessionOpened",
    "SnapshotSuspect",
    "Verification",
    "append",
    "append_many",
    "board_files",
    "board_path",
    "check_name",
    "event_fields",
    "event_from_fields",
    "format_time",
    "loads_line",
    "measurement_from_v1",
    "now_utc",
    "parse_lines",
    "parse_record",
    "read_board",
    "read_file",
    "record_id_time",
    "resolve_logs_dir",
    "schema_for",
    "time_key",
]
