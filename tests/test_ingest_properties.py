"""Property-based tests: malformed CSV content never raises, loses no valid row, accounts for every rejected one."""

import math

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ingest.logfile import BOUNDS_SI, read_log
from ingest.profile import Profile

HEADER = "time,WSS FL [km/h],WSS FR [km/h],Yaw rate [deg/s],Brake"
_SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

valid_speed = st.floats(0, 300, allow_nan=False).map(lambda v: f"{v:.3f}")
valid_yaw = st.floats(-170, 170, allow_nan=False).map(lambda v: f"{v:.2f}")
bad_cell = st.sampled_from(["abc", "1..2", "--5", "1e", "0x10", "inf", "999", "-80", "12,5,", "∞"])  # -80 km/h: past reversing
switch = st.sampled_from(["0", "1", "on", "off", "", "true"])


@st.composite
def mixed_log(draw):
    """Rows that are valid or broken by construction, with increasing times."""
    n = draw(st.integers(1, 40))
    lines, valid = [HEADER], []
    for i in range(n):
        cells = [f"2026-03-02T07:00:{i // 10:02d}.{i % 10}Z", draw(valid_speed), draw(valid_speed),
                 draw(valid_yaw), draw(switch)]
        broken = draw(st.booleans())
        if broken:
            which = draw(st.sampled_from(["cell", "fields", "time"]))
            if which == "cell":
                cells[draw(st.integers(1, 2))] = draw(bad_cell)
            elif which == "fields":
                cells.append("extra")
            else:
                cells[0] = draw(st.sampled_from(["yesterday", "2026-13-45T99:00:00Z", "2026-03-02T07:00:00"]))
        if draw(st.booleans()):
            cells[3] = ""  # a missing cell is data, not a reject
        lines.append(",".join(cells))
        if not broken:
            valid.append(i + 2)  # 1-based line number
    return "\n".join(lines) + "\n", valid


@_SETTINGS
@given(mixed_log())
def test_every_valid_row_is_kept_and_every_broken_row_is_rejected_with_its_line(case):
    text, valid = case
    r = read_log(text.encode(), "p.csv", "PROP", Profile(), 300)
    assert r.unusable is None
    kept = sorted(int(x) for t in r.trips for x in t.lines)
    rejected = sorted(line for line, _ in r.rejects)
    assert kept == valid
    assert sorted(kept + rejected) == list(range(2, r.n_rows + 2))
    assert all(reason for _, reason in r.rejects)


junk_text = st.text(alphabet=st.sampled_from(list("0123456789,;.:-+ \t\r\n#\"'abcTZé°\x00")), max_size=400)
header_pool = st.sampled_from(["time", "t [s]", "FL [km/h]", "wss fr (mph)", "Yaw rate [rad/s]", "ABS lamp",
                               "Vehicle ID", "VIN", "", "x", "Lat accel [V]", "timestamp"])


@_SETTINGS
@given(st.lists(header_pool, min_size=0, max_size=6), st.sampled_from([",", ";"]), junk_text,
       st.sampled_from(["utf-8", "latin-1", "utf-8-sig"]))
def test_arbitrary_content_never_raises_and_every_row_is_accounted_for(headers, delim, body, encoding):
    text = delim.join(headers) + "\n" + body
    raw = text.encode(encoding, errors="replace")
    r = read_log(raw, "junk_20260302T071400Z.csv", "JUNK", Profile(), 300)
    if r.unusable is not None:
        assert isinstance(r.unusable, str) and r.unusable
        assert not r.trips
        return
    stored = sum(t.info["n_samples"] for t in r.trips)
    assert stored + len(r.rejects) == r.n_rows
    assert len({line for line, _ in r.rejects}) == len(r.rejects)
    for t in r.trips:
        times = t.samples.column("time").to_numpy()
        assert (np.diff(times.astype("int64")) > 0).all()
        for name in ("wheel_speed_fl", "wheel_speed_fr"):
            v = t.samples.column(name).to_numpy(zero_copy_only=False)
            lo, hi = BOUNDS_SI[name]  # negative while reversing
            assert all(math.isnan(x) or lo <= x <= hi for x in v)


preamble_line = st.one_of(
    st.builds(lambda k, v: f"{k}: {v}", st.sampled_from(["Vehicle", "Export", "Units", "Created", "Logger"]),
              st.text(alphabet=st.sampled_from(list("abcXYZ0123456789 -_.:/")), min_size=1, max_size=24)),
    st.builds(lambda w: f"Trip log {w}", st.text(alphabet=st.sampled_from(list("abc 0123456789-.")), max_size=20)),
    st.builds(lambda k, v: f"{k},{v}", st.sampled_from(["Tool", "Version", "Site"]),
              st.text(alphabet=st.sampled_from(list("abc0123456789.")), min_size=1, max_size=8)))


@_SETTINGS
@given(mixed_log(), st.lists(preamble_line, min_size=1, max_size=5))
def test_a_preamble_before_the_header_changes_nothing_but_the_line_numbers(case, preamble):
    text, valid = case
    plain = read_log(text.encode(), "p.csv", "PROP", Profile(), 300)
    r = read_log(("\n".join(preamble) + "\n" + text).encode(), "p.csv", "PROP", Profile(), 300)
    shift = len(preamble)
    assert r.unusable is None
    assert sorted(int(x) for t in r.trips for x in t.lines) == [line + shift for line in valid]
    assert sorted(line for line, _ in r.rejects) == sorted(line + shift for line, _ in plain.rejects)
    assert any("read as a preamble" in w for w in r.warnings)
