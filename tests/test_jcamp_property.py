"""Mutated JCAMP-DX files give a Spectrum, a LineList or one SpectrumFileError; never a hang."""
from __future__ import annotations

import io

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from processing.errors import SpectrumFileError
from processing.readers import jcamp
from processing.readers.jcamp_write import write_jcamp, write_peak_table
from processing.spectrum import LineList, Spectrum


def _valid_files() -> list[bytes]:
    x = 2000.0 + 0.5 * np.arange(60)
    y = 0.1 + 0.5 * np.exp(-(((x - 2015.0) / 2.0) ** 2))
    spectrum = Spectrum.from_y(x, y, "absorbance")
    files = []
    for form, kind, descending in (("dif", "absorbance", False), ("affn", "transmittance", True)):
        buffer = io.BytesIO()
        write_jcamp(buffer, spectrum, form=form, y_kind=kind, descending=descending)
        files.append(buffer.getvalue())
    buffer = io.BytesIO()
    write_peak_table(buffer, LineList(x[:5], y[:5], "absorbance"))
    files.append(buffer.getvalue())
    # hand-made: a link block around a peak table and a SQZ/DIF/DUP spectrum with comments
    files.append(
        b"##TITLE=link\n##JCAMP-DX=5.01\n##DATA TYPE=LINK\n##BLOCKS=2\n"
        b"##TITLE=peaks\n##DATA TYPE=INFRARED PEAK TABLE\n##XUNITS=1/CM\n##YUNITS=ABSORBANCE\n"
        b"##PEAK TABLE=(XY..XY)\n1001, 2; 1003.5, 1\n##END=\n"
        b"##TITLE=cell\n##DATA TYPE=INFRARED SPECTRUM\n##XUNITS=MICROMETERS\n##YUNITS=TRANSMITTANCE\n"
        b"##XFACTOR=0,001\n##YFACTOR=0.01\n##FIRSTX=2.5\n##LASTX=2.509\n##NPOINTS=10 $$ count\n"
        b"##XYDATA=(X++(Y..Y)\n2500A00JT%T\n2504A02j%U\n2508A01J\n2509A02\n##END=\n##END=\n"
    )
    return files


VALID = _valid_files()
JUNK_LINES = [b"##", b"##=", b"##END=", b"##TITLE=again", b"##NPOINTS=99999999999", b"$$", b"S9999",
              b"\x00\x01", b"nan inf", b"1E+999", b"##XYDATA=(X++(Y..Y))", b"??", b"-", b"Z9Z9"]


@st.composite
def mutated(draw: st.DrawFn) -> bytes:
    data = bytearray(draw(st.sampled_from(VALID)))
    for _ in range(draw(st.integers(1, 4))):
        action = draw(st.sampled_from(["flip", "delete", "truncate", "insert"]))
        if not data:
            break
        at = draw(st.integers(0, len(data) - 1))
        if action == "flip":
            data[at] = draw(st.integers(0, 255))
        elif action == "delete":
            del data[at : at + draw(st.integers(1, 20))]
        elif action == "truncate":
            del data[at:]
        else:
            line = draw(st.sampled_from(JUNK_LINES)) + b"\n"
            start = data.rfind(b"\n", 0, at) + 1
            data[start:start] = line
    return bytes(data)


@settings(max_examples=200, deadline=2000, suppress_health_check=[HealthCheck.too_slow])
@given(mutated())
def test_mutations_give_a_result_or_one_error(data: bytes) -> None:
    try:
        result = jcamp.parse(data, "mutant.jdx")
    except SpectrumFileError as error:
        assert str(error).startswith("mutant.jdx")
        assert "reader fault" not in str(error)  # the safety net must not be what caught it
        return
    assert isinstance(result, (Spectrum, LineList))
    values = result.absorbance if isinstance(result, Spectrum) else result.intensity
    assert np.all(np.isfinite(values))
