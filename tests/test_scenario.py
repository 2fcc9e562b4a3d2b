"""Scenario files: the schema, its defaults, and one clear sentence for every kind of mistake."""

import copy
import datetime as dt
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.errors import ScenarioError
from planner.workflow.scenario import Scenario, load_scenario, parse_scenario

DEMO = Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "demo.yaml"

VALID = {
    "site": {"latitude_deg": -27.45, "longitude_deg": -69.95, "elevation_m": 2410,
             "timezone": "America/Santiago"},
    "run": {"first_night": "2027-10-04", "nights": 2},
    "targets": [
        {"id": "Star-1", "ra_deg": 10.0, "dec_deg": -30.0, "v_mag": 8.0, "rv_file": "rv/a.csv"},
        {"id": "Star-2", "ra_deg": 20.0, "dec_deg": -20.0, "v_mag": 7.5, "rv_file": "rv/a.csv",
         "planets": 2, "exposures_s": [900, 300]},
    ],
}


@pytest.fixture
def folder(tmp_path):
    (tmp_path / "rv").mkdir()
    (tmp_path / "rv" / "a.csv").write_text("time,rv,rv_err\n2460000.5,1.0,1.0\n")
    return tmp_path


def _load(folder, doc):
    path = folder / "run.yaml"
    path.write_text(yaml.safe_dump(doc))
    return load_scenario(path)


def _error(folder, doc) -> str:
    with pytest.raises(ScenarioError) as info:
        _load(folder, doc)
    message = str(info.value)
    assert message.startswith("run.yaml: "), message  # names the file
    assert "\n" not in message
    return message


def test_valid_document_gets_defaults_and_resolved_paths(folder, monkeypatch):
    monkeypatch.chdir("/")  # paths must be relative to the file, not to the working folder
    scenario = _load(folder, VALID)
    assert isinstance(scenario, Scenario)
    assert scenario.targets[0].rv_file == folder / "rv" / "a.csv"
    assert scenario.run.twilight == "nautical"
    assert scenario.constraints.max_airmass == 2.0
    assert scenario.target_exposures(scenario.targets[0]) == scenario.exposures.options_s
    assert scenario.target_exposures(scenario.targets[1]) == (300.0, 900.0)
    # Gregorian calendar: 2027-10-04 is followed by 2027-10-05.
    assert scenario.night_dates() == ("2027-10-04", "2027-10-05")


def test_records_are_frozen(folder):
    scenario = _load(folder, VALID)
    with pytest.raises(AttributeError):
        scenario.run.nights = 3


def test_demo_scenario_loads():
    scenario = load_scenario(DEMO)
    assert scenario.run.nights == 5 and len(scenario.targets) == 40
    assert all(t.rv_file.is_file() for t in scenario.targets)
    assert len({t.id for t in scenario.targets}) == 40


def test_misspelt_key_names_path_and_suggests(folder):
    doc = copy.deepcopy(VALID)
    doc["targets"][1]["vmag"] = doc["targets"][1].pop("v_mag")
    message = _error(folder, doc)
    assert "targets[1].vmag: unknown key (did you mean 'v_mag'?)" in message


def test_misspelt_section_suggests(folder):
    doc = copy.deepcopy(VALID)
    doc["constriants"] = {"max_airmass": 1.8}
    assert "did you mean 'constraints'?" in _error(folder, doc)


def test_wrong_type_says_what_was_expected(folder):
    doc = copy.deepcopy(VALID)
    doc["targets"][1]["v_mag"] = "bright"
    message = _error(folder, doc)
    assert "targets[1].v_mag: expected a number from -2 to 20" in message
    assert "'bright'" in message


def test_boolean_is_not_a_number(folder):
    doc = copy.deepcopy(VALID)
    doc["run"]["nights"] = True
    assert "run.nights: expected a whole number" in _error(folder, doc)


def test_out_of_range_value(folder):
    doc = copy.deepcopy(VALID)
    doc["site"]["latitude_deg"] = 95.0  # latitudes lie in [-90, 90]
    assert "site.latitude_deg: expected a number from -90 to 90" in _error(folder, doc)


def test_missing_rv_file(folder):
    doc = copy.deepcopy(VALID)
    doc["targets"][0]["rv_file"] = "rv/missing.csv"
    message = _error(folder, doc)
    assert "targets[0].rv_file" in message and "does not exist" in message


@pytest.mark.parametrize("date", ["2027-02-29", "2027-13-01", "04/10/2027"])
def test_impossible_dates(folder, date):
    # Gregorian calendar: 2027 is not a leap year and has twelve months.
    doc = copy.deepcopy(VALID)
    doc["run"]["first_night"] = date
    assert "run.first_night: expected a date YYYY-MM-DD" in _error(folder, doc)


def test_impossible_date_unquoted_in_yaml(folder):
    # Unquoted, the YAML timestamp constructor itself rejects the date.
    path = folder / "run.yaml"
    text = yaml.safe_dump(VALID).replace("first_night: '2027-10-04'", "first_night: 2027-02-30")
    assert "2027-02-30" in text
    with pytest.raises(ScenarioError, match="run.yaml: the file holds a value YAML cannot read"):
        parse_scenario(text, path)


def test_yaml_date_is_accepted(folder):
    doc = copy.deepcopy(VALID)
    doc["run"]["first_night"] = dt.date(2027, 10, 4)
    assert _load(folder, doc).run.first_night == "2027-10-04"


def test_zero_nights(folder):
    doc = copy.deepcopy(VALID)
    doc["run"]["nights"] = 0
    assert "run.nights: expected a whole number from 1 to 60" in _error(folder, doc)


def test_empty_target_list(folder):
    doc = copy.deepcopy(VALID)
    doc["targets"] = []
    assert "targets: the target list is empty" in _error(folder, doc)


def test_duplicate_ids(folder):
    doc = copy.deepcopy(VALID)
    doc["targets"][1]["id"] = "Star-1"
    assert "targets[1].id: the id 'Star-1' is already used by targets[0]" in _error(folder, doc)


def test_missing_required_key(folder):
    doc = copy.deepcopy(VALID)
    del doc["targets"][0]["dec_deg"]
    assert "targets[0].dec_deg is missing" in _error(folder, doc)


def test_unknown_time_zone_and_twilight(folder):
    doc = copy.deepcopy(VALID)
    doc["site"]["timezone"] = "Mars/Olympus"  # not in the IANA time zone database
    assert "site.timezone: expected an IANA time zone name" in _error(folder, doc)
    doc = copy.deepcopy(VALID)
    doc["run"]["twilight"] = "nautcal"
    assert "did you mean 'nautical'?" in _error(folder, doc)


def test_windows_are_parsed_to_jd(folder):
    doc = copy.deepcopy(VALID)
    doc["targets"][0]["windows"] = [["2027-10-05T00:00:00Z", "2027-10-05T06:00:00Z"]]
    window = _load(folder, doc).targets[0].windows[0]
    # JD of 2027-10-05 00:00 UTC is 2461683.5 (astropy: Time('2027-10-05').jd).
    assert window[0] == pytest.approx(2461683.5, abs=1e-9)
    assert window[1] - window[0] == pytest.approx(0.25, abs=1e-9)
    doc["targets"][0]["windows"] = [["2027-10-05T06:00:00Z", "2027-10-05T00:00:00Z"]]
    assert "ends before it starts" in _error(folder, doc)


def test_not_yaml_gives_line(folder):
    with pytest.raises(ScenarioError, match=r"run.yaml: the file is not valid YAML at line 2"):
        parse_scenario("site:\n\tlatitude_deg: 1\n", folder / "run.yaml")  # a tab indent


def test_missing_scenario_file(tmp_path):
    with pytest.raises(ScenarioError, match="does not exist"):
        load_scenario(tmp_path / "none.yaml")


def test_unknown_target_lookup_suggests(folder):
    scenario = _load(folder, VALID)
    with pytest.raises(ScenarioError, match="did you mean 'Star-1'"):
        scenario.target("Star1")


# --- hypothesis: whatever the document, the loader returns a Scenario or one clear sentence ---

_scalars = st.one_of(st.none(), st.booleans(), st.integers(-10**30, 10**30),
                     st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12),
                     st.dates())
_values = st.recursive(_scalars, lambda inner: st.one_of(
    st.lists(inner, max_size=3), st.dictionaries(st.text(max_size=10), inner, max_size=3)),
    max_leaves=8)


def _paths(doc, prefix=()):
    """Every key path into a nested document."""
    if isinstance(doc, dict):
        for key, value in doc.items():
            yield (*prefix, key)
            yield from _paths(value, (*prefix, key))
    elif isinstance(doc, list):
        for i, value in enumerate(doc):
            yield (*prefix, i)
            yield from _paths(value, (*prefix, i))


_ALL_PATHS = list(_paths(VALID))
# The folder fixture only holds a read-only RV file, so sharing it across examples is safe.
_FIXTURE_OK = [HealthCheck.function_scoped_fixture]


def _check_clear(text, path):
    try:
        parse_scenario(text, path)
    except ScenarioError as exc:
        message = str(exc)
        assert message.startswith("run.yaml") and "\n" not in message and message.endswith(".")


@settings(max_examples=150, deadline=None, suppress_health_check=_FIXTURE_OK)
@given(where=st.sampled_from(_ALL_PATHS), value=_values)
def test_mutated_documents_fail_only_with_a_sentence(folder, where, value):
    doc = copy.deepcopy(VALID)
    node = doc
    for key in where[:-1]:
        node = node[key]
    node[where[-1]] = value
    _check_clear(yaml.safe_dump(doc), folder / "run.yaml")


@settings(max_examples=100, deadline=None, suppress_health_check=_FIXTURE_OK)
@given(text=st.one_of(st.text(max_size=80), _values.map(yaml.safe_dump)))
def test_arbitrary_documents_fail_only_with_a_sentence(folder, text):
    _check_clear(text, folder / "run.yaml")


def test_the_documented_example_is_valid(tmp_path):
    import re

    text = (Path(__file__).resolve().parents[1] / "docs" / "scenario.md").read_text()
    block = re.search(r"```yaml\n(.*?)```", text, re.S).group(1)
    (tmp_path / "rv").mkdir()
    (tmp_path / "rv" / "ankpe-51.csv").write_text("time,rv,rv_err\n2460000.5,1.0,1.0\n")
    scenario = parse_scenario(block, tmp_path / "example.yaml")
    doc = copy.deepcopy(VALID)
    for target in doc["targets"]:
        target["rv_file"] = "rv/ankpe-51.csv"
    defaults = parse_scenario(yaml.safe_dump(doc), tmp_path / "run.yaml")
    # Every default the document states is the loader's default.
    for section in ("constraints", "telescope", "instrument", "exposures", "sky", "solver"):
        assert getattr(scenario, section) == getattr(defaults, section), section
    assert scenario.sampler == defaults.sampler
