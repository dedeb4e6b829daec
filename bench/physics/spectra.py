"""Cross-section spectra read from the user's CSV files.

The file format is plain comma-separated text::

    # any number of comment lines starting with '#', and blank lines, anywhere
    wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]
    1020.0,1.1e-21,1.5e-21
    1030.0,0.6e-21,2.0e-21
    ...

The header row names the columns, each with its unit in square brackets: ``wavelength`` (any
length unit) and one or both of ``sigma_a`` and ``sigma_e`` (any area unit, e.g. ``cm^2`` or
``1e-20 cm^2``), in any order. When one cross-section is missing it is derived from the other
with the McCumber relation, which needs the zero-line energy and the temperature of the sample.
The wavelength column must be strictly increasing or strictly decreasing (a decreasing file
is reversed) and stay within 200 nm to 20 µm.

Every problem is a `ConfigError` naming the file, the line and what was expected.

A run keeps its spectrum
------------------------
A recorded run must not depend on a file that may be edited, moved or deleted later, so the
run file holds the spectrum itself (`stored_form`, in the run's meta row ``spectrum``): the
file's text, its name and SHA-256 checksum, the table read from it in SI units (wavelength,
sigma_a, sigma_e), which column was derived with the McCumber relation and the zero-line
energy and temperature it was derived with. Reading the run's bench file back inside
`using_stored` takes the spectrum from there instead of from the file (`spectrum_for_bench`).
"""

from __future__ import annotations

import contextvars
import hashlib
import math
import re
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from bench import physics
from bench.errors import ConfigError
from bench.physics.arguments import check_positive
from bench.units import parse_quantity

#: Column names a spectrum file may use, and the kind of unit each takes.
COLUMNS = {"wavelength": "length", "sigma_a": "area", "sigma_e": "area"}
#: Wavelengths a spectrum may cover, in m.
WAVELENGTH_MIN = 200e-9
WAVELENGTH_MAX = 20e-6
#: Keys named in errors when a McCumber derivation lacks its inputs.
ZERO_LINE_KEY = "sample.zero_line"
TEMPERATURE_KEY = "sample.temperature"

_EXAMPLE_HEADER = "wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]"
_HEADER_CELL = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*\[([^\[\]]*)\]\s*$")
_MAX_UNIT_CHARS = 40
#: An exponent in a unit: ``^`` or ``**`` and what follows it.
_EXPONENT = re.compile(r"(\*\*|\^)\s*([^\s*/^()]*)")
_SMALL_EXPONENT = re.compile(r"^[+-]?\d{1,2}(\.\d*)?$")


@dataclass(frozen=True, eq=False)
class CrossSectionSpectrum:
    """Absorption and emission cross-sections on a common wavelength grid, SI units.

    Attributes
    ----------
    wavelength : numpy.ndarray
        Wavelengths in m, strictly increasing (read-only array).
    sigma_a, sigma_e : numpy.ndarray
        Absorption and emission cross-sections in m² at each wavelength (read-only arrays).
    source : str
        Where the spectrum came from (a file path), used in error messages.
    derived : str or None
        ``"sigma_e"`` or ``"sigma_a"`` if that column was derived with the McCumber relation,
        ``None`` if both were in the file.
    """

    wavelength: np.ndarray
    sigma_a: np.ndarray
    sigma_e: np.ndarray
    source: str
    derived: str | None = None

    def __post_init__(self) -> None:
        arrays = {}
        for name in ("wavelength", "sigma_a", "sigma_e"):
            arr = np.array(getattr(self, name), dtype=np.float64)
            if arr.ndim != 1:
                raise ValueError(f"{name}: must be a 1-d array, got shape {arr.shape}")
            if not np.all(np.isfinite(arr)):
                raise ValueError(f"{name}: must be finite")
            arr.setflags(write=False)
            arrays[name] = arr
        lam = arrays["wavelength"]
        if lam.size < 2 or np.any(np.diff(lam) <= 0) or lam[0] <= 0:
            raise ValueError("wavelength: must hold at least 2 positive, strictly increasing values")
        for name in ("sigma_a", "sigma_e"):
            if arrays[name].shape != lam.shape:
                raise ValueError(f"{name}: shape {arrays[name].shape} does not match wavelength {lam.shape}")
            if np.any(arrays[name] < 0):
                raise ValueError(f"{name}: cross-sections must be zero or positive")
        if self.derived not in (None, "sigma_a", "sigma_e"):
            raise ValueError(f"derived: must be None, 'sigma_a' or 'sigma_e', got {self.derived!r}")
        for name, arr in arrays.items():
            object.__setattr__(self, name, arr)

    @property
    def wavelength_range(self) -> tuple[float, float]:
        """(shortest, longest) wavelength covered, in m."""
        return float(self.wavelength[0]), float(self.wavelength[-1])

    def at(self, wavelength: float) -> tuple[float, float]:
        """``(sigma_a, sigma_e)`` in m² at ``wavelength`` (m), interpolated linearly.

        Raises
        ------
        ValueError
            If ``wavelength`` is not a finite positive number.
        ConfigError
            If ``wavelength`` is outside the data, naming the file and its range.
        """
        lam = float(check_positive(wavelength, "wavelength", " (a wavelength in m)"))
        lo, hi = self.wavelength_range
        if not lo <= lam <= hi:
            raise ConfigError(
                f"{self.source}: wavelength {_nm(lam)} is outside the spectrum, which covers "
                f"{_nm(lo)} to {_nm(hi)}"
            )
        sa = float(np.interp(lam, self.wavelength, self.sigma_a))
        se = float(np.interp(lam, self.wavelength, self.sigma_e))
        return sa, se


def _nm(wavelength_m: float) -> str:
    return f"{wavelength_m * 1e9:.6g} nm"


def load_spectrum(
    path, *, epsilon: float | None = None, temperature: float | None = None
) -> CrossSectionSpectrum:
    """Read a cross-section spectrum file (format in the module docstring).

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file (UTF-8; a byte-order mark is accepted).
    epsilon : float, optional
        Zero-line energy in J (the ``sample.zero_line`` setting), needed only if one
        cross-section column is missing.
    temperature : float, optional
        Sample temperature in K (``sample.temperature``), needed with ``epsilon``.

    Raises
    ------
    ConfigError
        The file cannot be read, or its content is not a valid spectrum.

    References
    ----------
    .. [1] D. E. McCumber, Phys. Rev. 136, A954 (1964) (derivation of a missing column).
    """
    source = str(path)
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise ConfigError(f"{source}: cannot read the spectrum file ({exc.strerror or exc})") from None
    except UnicodeDecodeError as exc:
        raise ConfigError(
            f"{source}: not a UTF-8 text file (byte {exc.start} cannot be decoded); "
            "save the spectrum as UTF-8 CSV"
        ) from None
    return parse_spectrum_text(text, source, epsilon=epsilon, temperature=temperature)


def parse_spectrum_text(
    text: str, source: str, *, epsilon: float | None = None, temperature: float | None = None
) -> CrossSectionSpectrum:
    """Parse the text of a spectrum file; ``source`` names it in errors. See `load_spectrum`."""
    if not isinstance(text, str):  # the project's rule: ValueError naming the argument
        raise ValueError(f"text: expected a str, got {type(text).__name__}")  # noqa: TRY004
    lines = text.removeprefix("\ufeff").split("\n")
    rows = [(number, line.rstrip("\r")) for number, line in enumerate(lines, start=1)]
    rows = [(n, line) for n, line in rows if line.strip() and not line.lstrip().startswith("#")]
    if not rows:
        raise ConfigError(
            f"{source} line {len(lines)}: the file ends before the header row; expected a "
            f'line such as "{_EXAMPLE_HEADER}"'
        )
    header_line, header = rows[0]
    columns = _parse_header(header, header_line, source)
    values, line_numbers = _parse_rows(rows[1:], columns, header_line, source)
    lam = values["wavelength"]
    order = slice(None, None, -1) if lam[-1] < lam[0] else slice(None)
    data = {name: arr[order] for name, arr in values.items()}
    derived = _derive_missing(data, line_numbers[order], source, header_line, epsilon, temperature)
    return CrossSectionSpectrum(
        wavelength=data["wavelength"],
        sigma_a=data["sigma_a"],
        sigma_e=data["sigma_e"],
        source=source,
        derived=derived,
    )


class _Column:
    """One column of the header: its name, unit text and SI factor."""

    def __init__(self, name: str, unit: str, factor: float) -> None:
        self.name, self.unit, self.factor = name, unit, factor


def _parse_header(header: str, line: int, source: str) -> list[_Column]:
    where = f"{source} line {line}"
    columns: list[_Column] = []
    for cell in header.split(","):
        match = _HEADER_CELL.match(cell)
        if match is None:
            raise ConfigError(
                f'{where}: header cell "{cell.strip()}" is not a column name with its unit in '
                f'square brackets; expected a header row such as "{_EXAMPLE_HEADER}"'
            )
        name, unit = match.group(1).lower(), match.group(2).strip()
        if name not in COLUMNS:
            raise ConfigError(
                f'{where}: unknown column "{match.group(1)}"; the columns are '
                + ", ".join(f'"{c}"' for c in COLUMNS)
            )
        if any(c.name == name for c in columns):
            raise ConfigError(f'{where}: column "{name}" appears twice in the header')
        columns.append(_Column(name, unit, _unit_factor(name, unit, where)))
    names = {c.name for c in columns}
    if "wavelength" not in names:
        raise ConfigError(f'{where}: the header has no "wavelength" column; expected "{_EXAMPLE_HEADER}"')
    if not names & {"sigma_a", "sigma_e"}:
        raise ConfigError(
            f'{where}: the header has neither a "sigma_a" nor a "sigma_e" column; '
            "at least one cross-section column is needed"
        )
    return columns


def _unit_factor(name: str, unit: str, where: str) -> float:
    kind = COLUMNS[name]
    label = f'{where}: unit [{unit}] of column "{name}"'
    if not unit:
        raise ConfigError(
            f'{label} is empty; write the unit in the brackets, e.g. "{name} [nm]"'
            if kind == "length"
            else f'{label} is empty; write the unit in the brackets, e.g. "{name} [cm^2]"'
        )
    if len(unit) > _MAX_UNIT_CHARS:
        raise ConfigError(f"{label} is longer than {_MAX_UNIT_CHARS} characters")
    exponents = _EXPONENT.findall(unit)
    if len(exponents) > 2 or not all(_SMALL_EXPONENT.match(e) for _, e in exponents):
        # the unit parser evaluates integer powers exactly: 9**9**9 would never finish
        raise ConfigError(f'{label}: exponents must be small numbers such as "cm^2" (at most two)')
    try:
        factor = parse_quantity(unit, kind, label)
    except (OverflowError, ZeroDivisionError):
        raise ConfigError(f"{label} is out of range") from None
    if not (np.isfinite(factor) and factor > 0):
        raise ConfigError(f"{label} must be a positive unit")
    return factor


def _parse_rows(
    rows, columns: list[_Column], header_line: int, source: str
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """The columns in SI units, and the line number of each row."""
    if len(rows) < 2:
        raise ConfigError(
            f"{source} line {header_line}: {len(rows)} data row(s) follow the header; a spectrum "
            "needs at least 2"
        )
    data: dict[str, list[float]] = {c.name: [] for c in columns}
    previous: tuple[int, str, float] | None = None  # line, text, value of the last wavelength
    direction = 0.0
    for line, text in rows:
        where = f"{source} line {line}"
        cells = text.split(",")
        if len(cells) != len(columns):
            raise ConfigError(
                f"{where}: {len(cells)} value(s), but the header on line {header_line} names "
                f"{len(columns)} columns"
            )
        for column, cell in zip(columns, cells):
            value = _number(cell, column, where)
            written = f"{cell.strip()} {column.unit}"
            if column.name == "wavelength":
                if not WAVELENGTH_MIN <= value <= WAVELENGTH_MAX:
                    raise ConfigError(f"{where}: wavelength {written} is outside 200 nm to 20 µm")
                if previous is not None:
                    step = value - previous[2]
                    if step == 0:
                        raise ConfigError(
                            f"{where}: wavelength {written} repeats line {previous[0]} (each "
                            "wavelength may appear once)"
                        )
                    if direction == 0.0:
                        direction = step
                    elif step * direction < 0:
                        word = "beyond" if direction > 0 else "below"
                        raise ConfigError(
                            f"{where}: wavelength {written} is not {word} the previous "
                            f"{previous[1]} {column.unit} (the wavelength column must be monotonic)"
                        )
                previous = (line, cell.strip(), value)
            elif value < 0:
                raise ConfigError(
                    f"{where}: {column.name} {written} is negative (cross-sections are zero or positive)"
                )
            data[column.name].append(value)
    arrays = {name: np.asarray(vals, dtype=np.float64) for name, vals in data.items()}
    return arrays, np.array([line for line, _ in rows])


def _number(cell: str, column: _Column, where: str) -> float:
    text = cell.strip()
    try:
        value = float(text)
    except ValueError:
        value = None
    if value is None or "_" in text:
        raise ConfigError(f'{where}: "{text}" in column "{column.name}" is not a number')
    si = value * column.factor
    if not np.isfinite(si):
        raise ConfigError(f'{where}: "{text}" in column "{column.name}" is not a finite number')
    return si


def _derive_missing(
    data: dict[str, np.ndarray],
    line_numbers: np.ndarray,
    source: str,
    header_line: int,
    epsilon: float | None,
    temperature: float | None,
) -> str | None:
    have_a, have_e = "sigma_a" in data, "sigma_e" in data
    if have_a and have_e:
        return None
    given, missing = ("sigma_a", "sigma_e") if have_a else ("sigma_e", "sigma_a")
    need = [key for key, val in ((ZERO_LINE_KEY, epsilon), (TEMPERATURE_KEY, temperature)) if val is None]
    if need:
        raise ConfigError(
            f"{source} line {header_line}: the file has {given} but no {missing}, which is derived "
            f"with the McCumber relation; that needs {ZERO_LINE_KEY} and {TEMPERATURE_KEY} "
            f"(missing: {', '.join(need)})"
        )
    for key, val in ((ZERO_LINE_KEY, epsilon), (TEMPERATURE_KEY, temperature)):
        if not (isinstance(val, (int, float)) and not isinstance(val, bool) and np.isfinite(val) and val > 0):
            raise ConfigError(
                f"{key}: must be a positive quantity to derive {missing} in {source}, got {val!r}"
            )
    convert = physics.mccumber_emission if have_a else physics.mccumber_absorption
    values = np.asarray(convert(data["wavelength"], data[given], epsilon, temperature))
    bad = ~np.isfinite(values)
    if np.any(bad):
        lam = float(data["wavelength"][bad][0])
        raise ConfigError(
            f"{source} line {int(line_numbers[bad][0])}: {missing} derived with the McCumber "
            f"relation overflows at {_nm(lam)} (check {ZERO_LINE_KEY} and {TEMPERATURE_KEY}, "
            "or give both columns)"
        )
    data[missing] = values
    return missing


# --------------------------------------------------------------------------------------------
# The spectrum stored in a run

#: Version of the `stored_form` layout.
STORED_FORMAT = 1
#: Largest spectrum file kept in a run (bytes): a dense grid of a few thousand rows is far less.
MAX_STORED_BYTES = 4_000_000


def stored_form(path, *, epsilon: float | None = None, temperature: float | None = None) -> dict[str, Any]:
    """The spectrum file ``path`` as a JSON-ready mapping to store in a run (see the module
    docstring); the same errors as `load_spectrum`."""
    source = str(path)
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise ConfigError(f"{source}: cannot read the spectrum file ({exc.strerror or exc})") from None
    if len(raw) > MAX_STORED_BYTES:
        raise ConfigError(
            f"{source}: {len(raw)} bytes is more than a spectrum file may hold ({MAX_STORED_BYTES} bytes)"
        )
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ConfigError(
            f"{source}: not a UTF-8 text file (byte {exc.start} cannot be decoded); "
            "save the spectrum as UTF-8 CSV"
        ) from None
    spec = parse_spectrum_text(text, source, epsilon=epsilon, temperature=temperature)
    return {
        "format": STORED_FORMAT,
        "source_name": Path(path).name,
        "sha256": hashlib.sha256(raw).hexdigest(),
        "text": text,
        "wavelength_m": spec.wavelength.tolist(),
        "sigma_a_m2": spec.sigma_a.tolist(),
        "sigma_e_m2": spec.sigma_e.tolist(),
        "derived": spec.derived,
        "derived_with": ("McCumber relation" if spec.derived else None),
        "zero_line_energy_j": epsilon if spec.derived else None,
        "temperature_k": temperature if spec.derived else None,
    }


@dataclass(frozen=True, eq=False)
class StoredSpectrum:
    """A spectrum as a run stores it; `spectrum` gives the `CrossSectionSpectrum`."""

    table: CrossSectionSpectrum
    text: str
    source_name: str
    sha256: str
    epsilon: float | None
    temperature: float | None

    @classmethod
    def from_stored(cls, record: Any, where: str) -> StoredSpectrum:
        """Read `stored_form` back; ValueError naming ``where`` if it is not one."""
        if not isinstance(record, Mapping) or record.get("format") != STORED_FORMAT:
            raise ValueError(f"{where}: the stored spectrum is not in format {STORED_FORMAT}")
        text, name, digest = record.get("text"), record.get("source_name"), record.get("sha256")
        if not all(isinstance(v, str) for v in (text, name, digest)):
            raise ValueError(f"{where}: the stored spectrum lacks its text, file name or checksum")
        if hashlib.sha256(text.encode("utf-8")).hexdigest() != digest and not _bom_digest(text, digest):
            raise ValueError(f"{where}: the stored spectrum's text does not match its checksum")
        extra = {}
        for key in ("zero_line_energy_j", "temperature_k"):
            v = record.get(key)
            if v is not None and (
                isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v)
            ):
                raise ValueError(f"{where}: the stored spectrum's {key} is not a number")
            extra[key] = None if v is None else float(v)
        try:
            table = CrossSectionSpectrum(
                wavelength=record.get("wavelength_m"),
                sigma_a=record.get("sigma_a_m2"),
                sigma_e=record.get("sigma_e_m2"),
                source=f"{name} (stored in {where})",
                derived=record.get("derived"),
            )
        except (TypeError, ValueError) as exc:
            raise ValueError(f"{where}: the stored spectrum's table is damaged ({exc})") from None
        return cls(table, text, name, digest, extra["zero_line_energy_j"], extra["temperature_k"])

    def spectrum(self, epsilon: float | None, temperature: float | None) -> CrossSectionSpectrum:
        """The stored table; a derived column is derived again from the stored text only when
        the zero-line energy or the temperature differ from those it was derived with (a
        re-analysis that corrects them)."""
        if self.table.derived is None or (epsilon == self.epsilon and temperature == self.temperature):
            return self.table
        return parse_spectrum_text(self.text, self.table.source, epsilon=epsilon, temperature=temperature)


def _bom_digest(text: str, digest: str) -> bool:
    """Whether ``digest`` is that of ``text`` saved with a UTF-8 byte-order mark."""
    return hashlib.sha256(b"\xef\xbb\xbf" + text.encode("utf-8")).hexdigest() == digest


_IN_USE: contextvars.ContextVar[StoredSpectrum | None] = contextvars.ContextVar(
    "stored_spectrum", default=None
)


@contextmanager
def using_stored(stored: StoredSpectrum | None) -> Iterator[None]:
    """Within this block `spectrum_for_bench` gives ``stored`` (if not None) instead of a file."""
    token = _IN_USE.set(stored)
    try:
        yield
    finally:
        _IN_USE.reset(token)


def spectrum_for_bench(
    path, *, epsilon: float | None = None, temperature: float | None = None
) -> CrossSectionSpectrum | None:
    """The spectrum a bench file names: the stored one inside `using_stored`, else the file
    ``path`` read with `load_spectrum`; None when there is neither (no such file)."""
    stored = _IN_USE.get()
    if stored is not None:
        return stored.spectrum(epsilon, temperature)
    if not Path(path).exists():
        return None
    return load_spectrum(path, epsilon=epsilon, temperature=temperature)
