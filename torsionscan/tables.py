"""Reading a user's CSV table: one place for the file errors and the blank-row rule."""

import csv

from .errors import InputError


def read_csv_table(path, what, fix):
    """({lower-case stripped column name: header as written}, [(line number, row dict), ...]) of the
    CSV table at path, blank rows left out; one-line InputError naming `what` the table holds and
    `fix` (what to give instead) when the file cannot be read as UTF-8 CSV text."""
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            reader = csv.DictReader(handle)
            columns = {(c or "").strip().lower(): c for c in reader.fieldnames or []}
            rows = [(reader.line_num, row) for row in reader
                    if any((v or "").strip() for v in row.values() if isinstance(v, str))]
    except OSError as error:
        raise InputError(f"cannot read {what} from {path}: {error.strerror}; check the path") from None
    except UnicodeDecodeError:
        raise InputError(f"{path} is not a UTF-8 text table; give {fix}") from None
    except csv.Error as error:
        raise InputError(f"{path} could not be read as a CSV table ({error}); give {fix}") from None
    return columns, rows
