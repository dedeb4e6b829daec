"""Cross-section spectrum files: reading, McCumber derivation, interpolation and every error."""

import math
import re
from pathlib import Path

import numpy as np
import pytest
import stark_model
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, integrate

from bench.errors import ConfigError
from bench.physics import fitting
from bench.physics.spectra import CrossSectionSpectrum, load_spectrum, parse_spectrum_text

DATA = Path(__file__).parents[1] / "data" / "spectra"
CM2 = 1e-4  # m² per cm² (SI prefixes, BIPM SI Brochure)
NM = 1e-9
# zero line of the invented Yb-like test medium, 975 nm, as an energy (scipy.constants)
EPSILON = constants.h * constants.c / (975 * NM)
T_ROOM = 295.0
HEADER = "wavelength [nm],sigma_a [cm^2],sigma_e [cm^2]"


# --- valid files ---------------------------------------------------------------------------


def test_both_columns_are_read_in_si_units():
    # unit conversion nm -> m and cm² -> m² (BIPM SI Brochure prefixes)
    spec = load_spectrum(DATA / "both_columns.csv")
    assert spec.derived is None
    assert spec.source.endswith("both_columns.csv")
    assert spec.wavelength.size == 8
    assert spec.wavelength[0] == pytest.approx(940 * NM, rel=1e-15)
    assert spec.wavelength[-1] == pytest.approx(1050 * NM, rel=1e-15)
    assert spec.sigma_a[0] == pytest.approx(0.80e-20 * CM2, rel=1e-12)
    assert spec.sigma_e[6] == pytest.approx(2.00e-20 * CM2, rel=1e-12)
    assert np.all(np.diff(spec.wavelength) > 0)


def test_absorption_only_gets_emission_from_mccumber():
    # file in µm and 1e-24 m² (BIPM SI Brochure prefixes); the derived values themselves are
    # checked against an independent two-manifold model below
    spec = load_spectrum(DATA / "absorption_only.csv", epsilon=EPSILON, temperature=T_ROOM)
    assert spec.derived == "sigma_e"
    lam = np.array([0.940, 0.970, 0.980, 1.000, 1.030]) * 1e-6
    sigma_a = np.array([0.80, 1.00, 0.60, 0.08, 0.012]) * 1e-24
    np.testing.assert_allclose(spec.wavelength, lam, rtol=1e-15)
    np.testing.assert_allclose(spec.sigma_a, sigma_a, rtol=1e-12)
    # McCumber (1964): emission exceeds absorption on the long side of the zero line (975 nm)
    # and falls short of it on the short side
    assert np.all((spec.sigma_e > spec.sigma_a) == (lam > 975 * NM))


def test_decreasing_emission_only_file_is_reversed_and_absorption_derived():
    # rows in decreasing wavelength are put in increasing order; the derived values are
    # checked against an independent two-manifold model below
    spec = load_spectrum(DATA / "emission_decreasing.csv", epsilon=EPSILON, temperature=T_ROOM)
    assert spec.derived == "sigma_a"
    lam = np.array([1000, 1020, 1030, 1050]) * NM
    sigma_e = np.array([0.40, 0.60, 2.00, 0.25]) * 1e-20 * CM2
    np.testing.assert_allclose(spec.wavelength, lam, rtol=1e-15)
    np.testing.assert_allclose(spec.sigma_e, sigma_e, rtol=1e-12)
    # McCumber (1964): all rows lie on the long side of the 975 nm zero line
    assert np.all(spec.sigma_a < spec.sigma_e)


# --- McCumber derivation against an independent model -------------------------------------


def _stark_csv(model, column):
    rows = [
        f"{float(lam) * 1e9!r},{float(value) / CM2!r}"
        for lam, value in zip(model.wavelength, getattr(model, column))
    ]
    return f"wavelength [nm],{column} [cm^2]\n" + "\n".join(rows) + "\n"


@pytest.mark.parametrize("temperature", [77.0, 295.0, 450.0])
def test_mccumber_derivation_matches_a_two_manifold_boltzmann_model(temperature):
    # Reference: two Stark-split manifolds with Boltzmann populations summed level by level
    # (tests/stark_model.py); detailed balance gives sigma_e / sigma_a = (Z_l / Z_u)
    # exp((E_zl - h nu) / kT) line by line, McCumber, Phys. Rev. 136, A954 (1964), with
    # epsilon = E_zl + kT ln(Z_l / Z_u).
    model = stark_model.spectra(temperature)
    assert model.min_separation > 40  # neighbouring Gaussian lines add < exp(-800) at a centre
    from_a = parse_spectrum_text(
        _stark_csv(model, "sigma_a"), "stark_a.csv", epsilon=model.epsilon, temperature=temperature
    )
    assert from_a.derived == "sigma_e"
    np.testing.assert_allclose(from_a.sigma_e, model.sigma_e, rtol=1e-9)
    from_e = parse_spectrum_text(
        _stark_csv(model, "sigma_e"), "stark_e.csv", epsilon=model.epsilon, temperature=temperature
    )
    assert from_e.derived == "sigma_a"
    np.testing.assert_allclose(from_e.sigma_a, model.sigma_a, rtol=1e-9)


def test_mccumber_worked_number_for_the_two_manifold_model():
    # By hand, 295 K (kT = 205.04 cm^-1, scipy.constants): Z_l = 1 + e^(-560/205.04)
    # + e^(-615/205.04) + e^(-790/205.04) = 1 + 0.0651 + 0.0498 + 0.0212 = 1.1362,
    # Z_u = 1 + e^(-290/205.04) + e^(-355/205.04) = 1 + 0.2431 + 0.1770 = 1.4201.
    # Line 0 -> 0 (the zero line, 10320 cm^-1): sigma_e / sigma_a = Z_l / Z_u = 0.8001.
    # Line 560 -> 0 (9760 cm^-1): (Z_l / Z_u) e^(560/205.04) = 0.8001 * 15.35 = 12.28.
    kt_cm = constants.k * 295.0 / (constants.h * constants.c * 100)
    assert kt_cm == pytest.approx(205.04, abs=0.01)
    model = stark_model.spectra(295.0)
    ratio = dict(zip(np.round(1e-2 / model.wavelength), model.sigma_e / model.sigma_a))
    assert ratio[10320.0] == pytest.approx(0.8001, abs=1e-4)
    assert ratio[9760.0] == pytest.approx(12.28, abs=0.01)
    text = _stark_csv(model, "sigma_a")
    spec = parse_spectrum_text(text, "stark.csv", epsilon=model.epsilon, temperature=295.0)
    derived = dict(zip(np.round(1e-2 / spec.wavelength), spec.sigma_e / spec.sigma_a))
    assert derived[10320.0] == pytest.approx(0.8001, abs=1e-4)
    assert derived[9760.0] == pytest.approx(12.28, abs=0.01)


# --- Voigt lineshape against an independent convolution -----------------------------------


def _voigt_by_convolution(x, sigma, gamma):
    """Gaussian (standard deviation sigma) convolved with a Lorentzian (half width at half
    maximum gamma), both unit-area, by scipy.integrate.quad (Siegman, Lasers, sec. 3.3)."""

    def integrand(u, xx):
        gauss = math.exp(-0.5 * (u / sigma) ** 2) / (sigma * math.sqrt(2 * math.pi))
        lorentz = (gamma / math.pi) / ((xx - u) ** 2 + gamma**2)
        return gauss * lorentz

    out = []
    for xx in np.atleast_1d(x):
        lim = 40 * sigma
        value, _ = integrate.quad(
            integrand,
            -lim,
            lim,
            args=(xx,),
            points=[xx] if abs(xx) < lim else None,
            epsabs=0.0,
            epsrel=1e-11,
            limit=400,
        )
        out.append(value)
    return np.array(out)


@pytest.mark.parametrize(("sigma", "gamma"), [(0.7, 0.4), (1.0, 0.05), (0.2, 1.5)])
def test_voigt_line_matches_a_numerical_convolution(sigma, gamma):
    # reference: the convolution integral itself (scipy.integrate.quad), not voigt_profile;
    # voigt_line is scaled to its peak, so compare shapes normalised at the centre
    x = np.linspace(-4.0, 4.0, 17)
    ref = _voigt_by_convolution(x, sigma, gamma)
    peak = _voigt_by_convolution(0.0, sigma, gamma)[0]
    line = fitting.voigt_line(x + 0.3, 2.0, 0.3, sigma, gamma)
    np.testing.assert_allclose(line, 2.0 * ref / peak, rtol=1e-8)


def test_voigt_line_width_conventions():
    # Gaussian limit: sigma is the standard deviation, half maximum at sigma sqrt(2 ln 2);
    # Lorentzian limit: gamma is the half width at half maximum (Siegman, Lasers, sec. 3.3)
    half_g = 0.8 * math.sqrt(2 * math.log(2))
    assert fitting.voigt_line(half_g, 1.0, 0.0, 0.8, 0.0) == pytest.approx(0.5, rel=1e-12)
    assert fitting.voigt_line(3.0, 1.0, 0.0, 0.8, 0.0) == pytest.approx(
        math.exp(-0.5 * (3.0 / 0.8) ** 2), rel=1e-10
    )
    assert fitting.voigt_line(0.6, 1.0, 0.0, 0.0, 0.6) == pytest.approx(0.5, rel=1e-12)
    lorentz = 0.36 / (4.0 + 0.36)  # gamma^2 / (x^2 + gamma^2) at x = 2, gamma = 0.6
    assert fitting.voigt_line(2.0, 1.0, 0.0, 0.0, 0.6) == pytest.approx(lorentz, rel=1e-12)


def test_interpolation_is_linear_between_rows_and_exact_on_them():
    # linear interpolation: the midpoint of two rows is their mean (common practice, no source)
    spec = load_spectrum(DATA / "both_columns.csv")
    sa, se = spec.at(1025 * NM)
    assert sa == pytest.approx(0.5 * (0.03e-20 + 0.012e-20) * CM2, rel=1e-12)
    assert se == pytest.approx(0.5 * (0.60e-20 + 2.00e-20) * CM2, rel=1e-12)
    assert spec.at(1030 * NM) == pytest.approx((0.012e-20 * CM2, 2.00e-20 * CM2), rel=1e-12)
    assert isinstance(sa, float) and isinstance(se, float)


def test_outside_the_data_names_the_file_and_range():
    # user-facing errors name the file and what was expected (common practice, no source)
    spec = load_spectrum(DATA / "both_columns.csv")
    message = r"both_columns\.csv: wavelength 1064 nm is outside .*940 nm to 1050 nm"
    with pytest.raises(ConfigError, match=message):
        spec.at(1064 * NM)
    with pytest.raises(ValueError, match=r"^wavelength"):
        spec.at(-1.0)


def test_spectrum_arrays_are_read_only():
    # frozen dataclass holding read-only arrays (common practice, no source)
    spec = load_spectrum(DATA / "both_columns.csv")
    with pytest.raises(ValueError):
        spec.sigma_e[0] = 1.0


def test_text_with_comments_blank_lines_crlf_bom_and_other_column_order():
    # CSV line endings per RFC 4180 (CRLF); UTF-8 byte-order mark
    text = (
        "\ufeff# invented\r\n\r\nsigma_e [1e-20 cm^2] , wavelength [um]\r\n"
        "# mid comment\r\n2.0,1.03\r\n0.25,1.05\r\n"
    )
    spec = parse_spectrum_text(text, "mem.csv", epsilon=EPSILON, temperature=T_ROOM)
    np.testing.assert_allclose(spec.wavelength, [1030 * NM, 1050 * NM], rtol=1e-15)
    np.testing.assert_allclose(spec.sigma_e, [2.0e-24, 0.25e-24], rtol=1e-12)


def test_both_columns_ignore_mccumber_inputs():
    # McCumber derivation is used only for a missing column (common practice, no source)
    text = f"{HEADER}\n1000,1e-21,2e-21\n1010,1e-21,3e-21\n"
    spec = parse_spectrum_text(text, "mem.csv", epsilon=EPSILON, temperature=T_ROOM)
    assert spec.derived is None
    assert spec.sigma_e[1] == pytest.approx(3e-25, rel=1e-12)


# --- every error names the file, the line and what was expected -----------------------------

BAD_TEXTS = [
    ("no header", "# only a comment\n\n", r"mem\.csv line 3: the file ends before the header row"),
    (
        "numbers instead of header",
        "1000,1e-20,1e-20\n1010,1e-20,1e-20\n",
        r"mem\.csv line 1: header cell \"1000\" is not a column name with its unit",
    ),
    (
        "no unit brackets",
        "wavelength,sigma_a [cm^2]\n1000,1e-20\n1010,1e-20\n",
        r"mem\.csv line 1: header cell \"wavelength\" is not a column name",
    ),
    (
        "unknown column",
        "# c\nwavelength [nm],sigma_x [cm^2]\n1000,1e-20\n1010,1e-20\n",
        r"mem\.csv line 2: unknown column \"sigma_x\"",
    ),
    (
        "duplicate column",
        "wavelength [nm],sigma_a [cm^2],sigma_a [cm^2]\n",
        r"mem\.csv line 1: column \"sigma_a\" appears twice",
    ),
    (
        "no wavelength",
        "sigma_a [cm^2],sigma_e [cm^2]\n1,2\n3,4\n",
        r"mem\.csv line 1: the header has no \"wavelength\" column",
    ),
    (
        "no cross-section",
        "wavelength [nm]\n1000\n1010\n",
        r"mem\.csv line 1: the header has neither a \"sigma_a\" nor a \"sigma_e\" column",
    ),
    (
        "bad wavelength unit",
        "wavelength [kg],sigma_a [cm^2]\n1000,1e-20\n1010,1e-20\n",
        r"mem\.csv line 1: unit \[kg\] of column \"wavelength\".*not a length",
    ),
    (
        "bad area unit",
        "wavelength [nm],sigma_a [cm]\n1000,1e-20\n1010,1e-20\n",
        r"mem\.csv line 1: unit \[cm\] of column \"sigma_a\".*not an area",
    ),
    (
        "empty unit",
        "wavelength [],sigma_a [cm^2]\n1000,1e-20\n1010,1e-20\n",
        r"mem\.csv line 1: unit \[\] of column \"wavelength\" is empty",
    ),
    (
        "huge exponent unit",
        "wavelength [nm],sigma_a [9**9**9 cm^2]\n1000,1\n1010,1\n",
        r"mem\.csv line 1: unit .* exponents must be small numbers",
    ),
    (
        "non-number",
        f"{HEADER}\n1000,1e-20,2e-20\n1010,abc,2e-20\n",
        r"mem\.csv line 3: \"abc\" in column \"sigma_a\" is not a number",
    ),
    (
        "not finite",
        f"{HEADER}\n1000,1e-20,2e-20\n1010,1e-20,nan\n",
        r"mem\.csv line 3: \"nan\" in column \"sigma_e\" is not a finite number",
    ),
    (
        "wrong count",
        f"{HEADER}\n1000,1e-20,2e-20\n1010,1e-20\n",
        r"mem\.csv line 3: 2 value\(s\), but the header on line 1 names 3 columns",
    ),
    (
        "negative",
        f"{HEADER}\n1000,1e-20,2e-20\n1010,-1e-20,2e-20\n",
        r"mem\.csv line 3: sigma_a -1e-20 cm\^2 is negative",
    ),
    (
        "too short",
        f"{HEADER}\n190,1e-20,2e-20\n1010,1e-20,2e-20\n",
        r"mem\.csv line 2: wavelength 190 nm is outside 200 nm to 20 µm",
    ),
    (
        "too long",
        "wavelength [um],sigma_a [cm^2]\n10,1e-20\n25,1e-20\n",
        r"mem\.csv line 3: wavelength 25 um is outside 200 nm to 20 µm",
    ),
    (
        "one row",
        f"# c\n{HEADER}\n1000,1e-20,2e-20\n",
        r"mem\.csv line 2: 1 data row\(s\) follow the header; a spectrum needs at least 2",
    ),
    (
        "duplicate wavelength",
        f"{HEADER}\n1000,1e-20,2e-20\n1010,1e-20,2e-20\n1010,1e-20,2e-20\n",
        r"mem\.csv line 4: wavelength 1010 nm repeats line 3",
    ),
    (
        "not monotonic",
        f"{HEADER}\n1030,1e-20,2e-20\n1032.0,1e-20,2e-20\n1031.0,1e-20,2e-20\n",
        (
            r"mem\.csv line 4: wavelength 1031\.0 nm is not beyond the previous 1032\.0 nm "
            r"\(the wavelength column must be monotonic\)"
        ),
    ),
    (
        "not monotonic down",
        f"{HEADER}\n1040,1e-20,2e-20\n1032,1e-20,2e-20\n1035,1e-20,2e-20\n",
        r"mem\.csv line 4: wavelength 1035 nm is not below the previous 1032 nm",
    ),
]


@pytest.mark.parametrize("label, text, message", BAD_TEXTS, ids=[b[0] for b in BAD_TEXTS])
def test_bad_text_gives_config_error_naming_file_and_line(label, text, message):
    # user-facing errors name the file, line and what was expected (common practice, no source)
    with pytest.raises(ConfigError, match=message):
        parse_spectrum_text(text, "mem.csv", epsilon=EPSILON, temperature=T_ROOM)


@pytest.mark.parametrize(
    "epsilon, temperature, missing",
    [
        (None, None, "sample.zero_line, sample.temperature"),
        (EPSILON, None, "sample.temperature"),
        (None, T_ROOM, "sample.zero_line"),
    ],
)
def test_mccumber_derivation_names_the_missing_keys(epsilon, temperature, missing):
    # the derivation needs the zero-line energy and temperature (McCumber 1964)
    with pytest.raises(ConfigError, match=re.escape(f"(missing: {missing})")) as info:
        load_spectrum(DATA / "absorption_only.csv", epsilon=epsilon, temperature=temperature)
    assert "absorption_only.csv line 4" in str(info.value)  # the header row
    assert "sample.zero_line and sample.temperature" in str(info.value)


def test_mccumber_overflow_is_a_config_error():
    # McCumber (1964) factor at 4 K, 15 µm from a 975 nm zero line exceeds float64
    text = "wavelength [um],sigma_a [cm^2]\n14,1e-22\n15,1e-22\n"
    message = r"mem\.csv line 2: sigma_e derived with the McCumber relation overflows"
    with pytest.raises(ConfigError, match=message):
        parse_spectrum_text(text, "mem.csv", epsilon=EPSILON, temperature=4.0)


def test_bad_mccumber_inputs_name_the_key():
    # configuration keys are named in errors (common practice, no source)
    with pytest.raises(ConfigError, match=r"^sample\.temperature: must be a positive quantity"):
        load_spectrum(DATA / "absorption_only.csv", epsilon=EPSILON, temperature=-3.0)


def test_missing_and_undecodable_files(tmp_path):
    # the file is named in the error (common practice, no source)
    with pytest.raises(ConfigError, match=r"nowhere\.csv: cannot read the spectrum file"):
        load_spectrum(tmp_path / "nowhere.csv")
    latin = tmp_path / "latin1.csv"
    latin.write_bytes(b"# \xb5m\nwavelength [nm],sigma_a [cm^2]\n1000,1e-20\n1010,1e-20\n")
    with pytest.raises(ConfigError, match=r"latin1\.csv: not a UTF-8 text file"):
        load_spectrum(latin)


def test_spectrum_checks_its_own_arrays():
    # the dataclass refuses inconsistent arrays (common practice, no source)
    with pytest.raises(ValueError, match=r"^wavelength"):
        CrossSectionSpectrum(np.array([2e-6, 1e-6]), np.zeros(2), np.zeros(2), "x")
    with pytest.raises(ValueError, match=r"^sigma_e"):
        CrossSectionSpectrum(np.array([1e-6, 2e-6]), np.zeros(2), np.array([0.0, -1.0]), "x")


# --- fuzzing: nothing but ConfigError ---------------------------------------------------------


def _check_result(spec):
    assert np.all(np.diff(spec.wavelength) > 0)
    assert spec.wavelength[0] >= 200e-9 and spec.wavelength[-1] <= 20e-6
    assert np.all(spec.sigma_a >= 0) and np.all(spec.sigma_e >= 0)
    assert np.all(np.isfinite(spec.sigma_a)) and np.all(np.isfinite(spec.sigma_e))


@given(st.text(max_size=400))
def test_any_text_gives_a_spectrum_or_a_config_error(text):
    # robustness: arbitrary text never raises anything but ConfigError (common practice, no source)
    try:
        spec = parse_spectrum_text(text, "fuzz.csv", epsilon=EPSILON, temperature=T_ROOM)
    except ConfigError as exc:
        assert str(exc).startswith("fuzz.csv")
    else:
        _check_result(spec)


_headers = st.sampled_from(
    [
        HEADER,
        "wavelength [um],sigma_e [1e-20 cm^2]",
        "sigma_a [m**2], wavelength [ nm ]",
        "wavelength [nm],sigma_a [cm^2],sigma_e [cm^2],",
        "Wavelength [nm],Sigma_E [cm^2]",
        "wavelength [1/0],sigma_a [cm^2]",
        "wavelength [10**99 m],sigma_a [cm^2]",
        "wavelength [nm]",
    ]
)
_cells = st.one_of(
    st.floats(150.0, 2500.0).map(lambda v: f"{v:.1f}"),  # wavelength-like in nm
    st.floats(0.2, 2.5).map(lambda v: f"{v:.3f}"),  # wavelength-like in um
    st.floats(-0.1, 3.0).map(lambda v: f"{v:.3g}e-20"),  # cross-section-like in cm²
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.text(alphabet=",[]#-.e0123456789 \t", max_size=8),
)


@st.composite
def _near_valid_files(draw):
    """A header, then rows that mostly fit it, with wavelengths mostly sorted."""
    header = draw(_headers)
    width = header.count(",") + 1
    count = draw(st.integers(0, 8))
    wavelengths = sorted(draw(st.lists(st.floats(150.0, 2500.0), min_size=count, max_size=count)))
    if draw(st.booleans()):
        wavelengths.reverse()
    rows = []
    for lam in wavelengths:
        if draw(st.integers(0, 9)) == 0:  # now and then a row of anything
            rows.append(",".join(draw(st.lists(_cells, min_size=1, max_size=4))))
        else:
            rest = [draw(st.floats(0.0, 3.0).map(lambda v: f"{v:.3g}e-20")) for _ in range(width - 1)]
            rows.append(",".join([f"{lam:.1f}", *rest]))
    return header, rows


@settings(max_examples=300)
@given(
    _near_valid_files(),
    st.sampled_from(["\n", "\r\n"]),
    st.one_of(st.none(), st.just(EPSILON)),
    st.one_of(st.none(), st.floats(0.5, 600.0)),
)
def test_structured_fuzz_gives_a_spectrum_or_a_config_error(file, newline, epsilon, temperature):
    # robustness on near-valid files (common practice, no source)
    header, rows = file
    text = newline.join([header, *rows])
    try:
        spec = parse_spectrum_text(text, "fuzz.csv", epsilon=epsilon, temperature=temperature)
    except ConfigError as exc:
        assert re.match(r"^fuzz\.csv line \d+: ", str(exc))
    else:
        _check_result(spec)
        assert math.isfinite(spec.at(spec.wavelength[0])[0])
