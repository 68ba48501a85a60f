"""Tests of pipeline.settings: schema defaults, one-sentence errors naming the key, safe YAML loading.

The reference for the schema semantics is the JSON Schema 2020-12 specification as implemented by
the jsonschema package; defaults are checked against the values written in config/schema.yaml.
"""

import copy

import pytest
import yaml

from pipeline.settings import SCHEMA_FILE, check_inputs_exist, cube_entries, load_config, validate_config
from pipeline.errors import ConfigError

ELEMENTS = {"q_au": 1.2, "e": 3.1, "i_deg": 40.0, "node_deg": 120.0, "peri_deg": 60.0, "tp": "2031-05-10T00:00:00"}


def _base(**changes):
    config = {
        "target": {"ephemeris": "eph.ecsv"},
        "cubes": [{"path": "data/c1.fits"}, {"path": "data/c2.fits", "id": "second", "epoch": "e2"}],
        "species": ["CO", "HCN"],
    }
    config.update(copy.deepcopy(changes))
    return config


def test_defaults_filled_from_the_schema():
    config = validate_config(_base())
    with open(SCHEMA_FILE, encoding="utf-8") as fh:
        schema = yaml.safe_load(fh)
    props = schema["properties"]
    # every top-level default written in the schema file appears in the validated config
    for key, sub in props.items():
        if "default" in sub:
            assert key in config, key
    assert config["apertures_km"] == props["apertures_km"]["default"]
    assert config["observatory"] == "geocentre"
    assert config["limits"] == {"nsigma": 3, "window_factor": 1.5, "activity_slope": 2.0}
    assert config["comoving"]["half_width_km_s"] == 40
    assert config["excitation"]["t_kin_K"] == [10, 20, 40, 80]
    assert config["coma"] == {"outflow_km_s": "law", "solar_activity": "quiet"}
    assert config["budget"]["nucleus"] == {"radius_km": [0.1, 1.0], "density_kg_m3": [300, 1000]}
    assert config["target"]["name"] == "target"
    assert config["cubes"][0]["spectral_response"] == "hanning"
    # given values are kept, not overwritten by defaults
    config = validate_config(_base(limits={"nsigma": 5}))
    assert config["limits"] == {"nsigma": 5, "window_factor": 1.5, "activity_slope": 2.0}


def test_defaults_are_not_shared_between_configs():
    a = validate_config(_base())
    a["apertures_km"].append(99)
    b = validate_config(_base())
    assert 99 not in b["apertures_km"]


def test_cube_entries_ids_and_epochs():
    entries = cube_entries(validate_config(_base()))
    assert [(e.cube_id, e.epoch, e.path) for e in entries] == [("c1", "c1", "data/c1.fits"),
                                                               ("second", "e2", "data/c2.fits")]
    assert entries[0].time is None


@pytest.mark.parametrize("config, match", [
    (_base(speceis=["CO"]), r"camp\.yaml: unknown key 'speceis' under \(top level\) \(misspelt\?\)"),
    (_base(limits={"nsigmaa": 3}), r"unknown key 'nsigmaa' under limits .*allowed keys there: activity_slope, nsigma, window_factor"),
    (_base(budget={"nucleus": {"radius_kmm": [1, 2]}}), r"unknown key 'radius_kmm' under budget\.nucleus"),
    (_base(observatory={"lon_deg": 1.0, "lat_deg": 2.0, "heigth_m": 3.0}), r"unknown key 'heigth_m' under observatory"),
    (_base(target={"ephemeris": "e.ecsv", "nmae": "x"}), r"unknown key 'nmae' under target"),
    (_base(limits={"nsigma": "three"}), r"key limits\.nsigma = 'three' is not valid: 'three' is not of type 'number'"),
    (_base(species="CO"), r"key species = 'CO' is not valid: 'CO' is not of type 'array'"),
    (_base(apertures_km=[1000, -5]), r"key apertures_km\[1\] = -5 is not valid: .*minimum of 0"),
    (_base(apertures_arcsec=[0]), r"key apertures_arcsec\[0\] = 0 is not valid"),
    (_base(observatory={"lon_deg": 1.0, "lat_deg": 200.0, "height_m": 3.0}),
     r"key observatory\.lat_deg = 200\.0 is not valid: .*maximum of 90"),
    (_base(coma={"outflow_km_s": "fast"}), r"key coma\.outflow_km_s = 'fast' is not valid: .*not one of \['law'\]"),
    (_base(target={"ephemeris": "e.ecsv", "elements": ELEMENTS}),
     r"target gives both 'ephemeris' and 'elements'; expected exactly one of them"),
    (_base(target={"name": "x"}), r"target gives neither 'ephemeris' nor 'elements' and cubes\[0\] \(c1\) has no "
                                  r"'ephemeris' of its own; expected target.ephemeris or target.elements"),
    (_base(observatory={"name": "craft", "states": "s.ecsv", "centre": "moon"}),
     r"key observatory.centre = 'moon' is not valid: .*is not one of \['barycentre', 'geocentre', 'sun'\]"),
    (_base(cubes=[{"path": "a.fits", "observatory": {"name": "craft"}}]),
     r"cubes\[0\].observatory is missing the required key 'states'"),
    (_base(cubes=[{"path": "a.fits", "apertures_km": [-1]}]), r"key cubes\[0\].apertures_km\[0\] = -1"),
    (_base(target={"elements": {**ELEMENTS, "e": -0.5}}), r"key target\.elements\.e = -0\.5 is not valid"),
    (_base(target={"elements": {k: v for k, v in ELEMENTS.items() if k != "tp"}}),
     r"target\.elements is missing the required key 'tp'"),
    (_base(cubes=[{"path": "a.fits", "id": "../x"}]), r"key cubes\[0\]\.id = '\.\./x' is not valid"),
    (_base(cubes=[{"path": "a.fits", "epoch": "e/1"}]), r"key cubes\[0\]\.epoch = 'e/1' is not valid"),
    (_base(cubes=[{"path": "a.fits", "spectral_response": "boxcar"}]), r"key cubes\[0\]\.spectral_response"),
    (_base(cubes=[]), r"key cubes = \[\] is not valid"),
    (_base(cubes=[{"id": "x"}]), r"cubes\[0\] is missing the required key 'path'"),
])
def test_invalid_configs_name_the_key(config, match):
    with pytest.raises(ConfigError, match=match):
        validate_config(config, source="camp.yaml")


def test_missing_required_top_level_key():
    config = _base()
    del config["species"]
    with pytest.raises(ConfigError, match=r"camp\.yaml: \(top level\) is missing the required key 'species'"):
        validate_config(config, source="camp.yaml")


def test_duplicated_cube_ids():
    config = _base(cubes=[{"path": "a/c1.fits"}, {"path": "b/c1.fits"}])
    with pytest.raises(ConfigError, match=r"cube id 'c1' is used by both 'a/c1\.fits' and 'b/c1\.fits'"):
        validate_config(config)
    config = _base(cubes=[{"path": "a.fits", "id": "x"}, {"path": "b.fits", "id": "x"}])
    with pytest.raises(ConfigError, match="cube id 'x' is used by both"):
        validate_config(config)


def test_id_from_a_hidden_file_name_is_refused():
    with pytest.raises(ConfigError, match=r"cubes\[0\]: the id '' \(from the file name\) is not usable"):
        validate_config(_base(cubes=[{"path": "data/.hidden.fits"}]))


def test_elements_target_is_accepted():
    config = validate_config(_base(target={"elements": ELEMENTS}))
    assert config["target"]["elements"] == {**ELEMENTS, "time_scale": "utc"}     # the schema's default filled in
    # a Julian date in TDB, as element services give them, is accepted too
    config = validate_config(_base(target={"elements": {**ELEMENTS, "tp": 2462996.5, "time_scale": "tdb"}}))
    assert config["target"]["elements"]["tp"] == 2462996.5


def test_check_inputs_exist(tmp_path):
    eph = tmp_path / "eph.ecsv"
    eph.write_text("x")
    cube = tmp_path / "c1.fits"
    cube.write_text("x")
    config = validate_config(_base(target={"ephemeris": str(eph)}, cubes=[{"path": str(cube)}]))
    check_inputs_exist(config)                 # all present: no error
    config["cubes"].append({"path": str(tmp_path / "c2.fits")})
    with pytest.raises(ConfigError, match=r"camp\.yaml: cubes\[1\]\.path names the file '.*c2\.fits', which does not"):
        check_inputs_exist(config, source="camp.yaml")
    config = validate_config(_base(target={"ephemeris": str(tmp_path / "none.ecsv")}, cubes=[{"path": str(cube)}]))
    with pytest.raises(ConfigError, match=r"target\.ephemeris names the file"):
        check_inputs_exist(config)
    config = validate_config(_base(target={"ephemeris": str(eph)}, cubes=[{"path": str(cube)}],
                                   catalogue={"species_file": str(eph), "lines_file": "no_lines.ecsv"}))
    with pytest.raises(ConfigError, match=r"catalogue\.lines_file names the file 'no_lines\.ecsv'"):
        check_inputs_exist(config)
    # a directory is not a file
    config = validate_config(_base(target={"ephemeris": str(tmp_path)}, cubes=[{"path": str(cube)}]))
    with pytest.raises(ConfigError, match="target.ephemeris"):
        check_inputs_exist(config)


def test_load_config_round_trip(tmp_path):
    path = tmp_path / "camp.yaml"
    path.write_text(yaml.safe_dump(_base(campaign="a test campaign")))
    config = load_config(path)
    assert config["campaign"] == "a test campaign"
    assert config["limits"]["nsigma"] == 3


@pytest.mark.parametrize("text, match", [
    ("- a\n- b\n", "expected a mapping of keys at the top level, found list"),
    ("just a sentence\n", "expected a mapping of keys at the top level, found str"),
    ("", "found NoneType"),
    ("target: [unclosed\n", "is not valid YAML"),
])
def test_yaml_that_is_not_a_mapping(tmp_path, text, match):
    path = tmp_path / "bad.yaml"
    path.write_text(text)
    with pytest.raises(ConfigError, match=match):
        load_config(path)


def test_python_tags_are_not_executed(tmp_path):
    # yaml.safe_load refuses python/* tags (PyYAML documentation: only standard YAML tags are built);
    # the tag would create a folder if it were ever constructed
    marker = tmp_path / "constructed"
    path = tmp_path / "evil.yaml"
    path.write_text(f"target: !!python/object/apply:os.mkdir [{str(marker)!r}]\n"
                    "cubes: [{path: a.fits}]\nspecies: [CO]\n")
    with pytest.raises(ConfigError, match="is not valid YAML"):
        load_config(path)
    assert not marker.exists()
    path.write_text("target: !!python/object:pipeline.settings.CubeEntry {cube_id: x}\n")
    with pytest.raises(ConfigError, match="is not valid YAML"):
        load_config(path)


def test_missing_config_file(tmp_path):
    with pytest.raises(ConfigError, match=r"config file '.*absent\.yaml' does not exist"):
        load_config(tmp_path / "absent.yaml")


# ---- typed settings


def test_settings_are_typed_quantities_from_the_validated_config():
    import astropy.units as u
    from astropy.tests.helper import assert_quantity_allclose

    from pipeline.settings import Settings

    config = validate_config(_base(apertures_km=[500, 2000], apertures_arcsec=[3.0],
                                   observatory={"lon_deg": -70.0, "lat_deg": -24.0, "height_m": 5000.0}))
    s = Settings.from_config(config)
    assert s.species == ("CO", "HCN")
    assert_quantity_allclose(u.Quantity(s.apertures[:2]), [500, 2000] * u.km)
    assert_quantity_allclose(s.apertures[2], 3.0 * u.arcsec)
    assert_quantity_allclose(s.t_kin, [10, 20, 40, 80] * u.K)
    assert_quantity_allclose(s.half_width, 40 * u.km / u.s)
    assert s.coma.outflow == "law" and s.coma.solar_activity == "quiet"
    # the site: astropy's geodetic -> geocentric conversion of the same numbers (the reference)
    from astropy.coordinates import EarthLocation
    ref = EarthLocation.from_geodetic(-70.0 * u.deg, -24.0 * u.deg, 5000.0 * u.m)
    assert_quantity_allclose(u.Quantity(s.observatory.location.geocentric), u.Quantity(ref.geocentric))
    assert [c.cube_id for c in s.cubes] == ["c1", "second"] and s.cube is None
    assert s.with_cube("second").cube.epoch == "e2"
    assert s.observer_of(s.cubes[0]) is s.observatory and s.apertures_of(s.cubes[0]) == s.apertures


def test_a_cube_may_have_its_own_observer_ephemeris_and_apertures():
    import astropy.units as u

    from pipeline.settings import Settings

    craft = {"name": "Probe", "states": "probe.ecsv", "centre": "geocentre", "axes": "ecliptic"}
    config = validate_config(_base(cubes=[{"path": "data/c1.fits"},
                                          {"path": "data/ir.fits", "observatory": craft, "ephemeris": "probe_eph.ecsv",
                                           "apertures_km": [800], "apertures_arcsec": [0.5]}]))
    s = Settings.from_config(config)
    ground, ir = s.cubes
    assert s.observer_of(ground).kind == "geocentre" and s.ephemeris_of(ground) == "eph.ecsv"
    own = s.observer_of(ir)
    assert (own.kind, own.name, own.states, own.centre, own.axes) == ("spacecraft", "Probe", "probe.ecsv",
                                                                      "geocentre", "ecliptic")
    assert s.ephemeris_of(ir) == "probe_eph.ecsv" and s.elements_of(ir) is None
    assert s.with_cube("ir").apertures_of() == (800 * u.km, 0.5 * u.arcsec)
    assert s.with_cube("c1").apertures_of() == tuple(s.apertures)
    missing = s.missing_inputs("camp.yaml")
    assert "camp.yaml: cubes[1].observatory.states names the file 'probe.ecsv', which does not exist" in missing
    assert "camp.yaml: cubes[1].ephemeris names the file 'probe_eph.ecsv', which does not exist" in missing
    # every cube with its own table: the target may give neither ephemeris nor elements (nothing planned)
    config = validate_config(_base(target={"name": "x"}, cubes=[{"path": "a.fits", "ephemeris": "a.ecsv"}]))
    assert Settings.from_config(config).ephemeris_of(Settings.from_config(config).cubes[0]) == "a.ecsv"
    assert s.interferometer is None and s.catalogue_files is None
    # the nucleus mass range from the schema's default radius and density: M = 4/3 pi R^3 rho (closed form)
    m = s.budget.baseline.mass_kg
    assert m[0] == pytest.approx(4 / 3 * 3.141592653589793 * 100.0**3 * 300, rel=1e-12)
    assert m[1] == pytest.approx(4 / 3 * 3.141592653589793 * 1000.0**3 * 1000, rel=1e-12)
    with pytest.raises(ConfigError, match="no cube with id 'third'"):
        s.with_cube("third")


def test_a_step_reads_only_the_sections_its_rule_declares():
    from pipeline.settings import Settings, sections_record

    config = validate_config(_base())
    given = sections_record(config, ["coma", "limits.window_factor"])
    assert given == {"outdir": "results", "coma": config["coma"], "limits": {"window_factor": 1.5}}
    s = Settings.from_config(given, sections=given)
    assert s.limits.window_factor == 1.5 and s.coma.outflow == "law"
    assert s.record == given                                   # what provenance records: exactly what was given
    with pytest.raises(ConfigError, match=r"not given the config key 'limits.nsigma'"):
        s.limits.nsigma
    with pytest.raises(ConfigError, match=r"not given the config key 'excitation'"):
        s.t_kin
    # an optional section the campaign does not configure is given as None: "not configured", readable
    given = sections_record(config, ["interferometer"])
    assert Settings.from_config(given, sections=given).interferometer is None


def test_absolute_magnitude_needs_an_albedo():
    with pytest.raises(ConfigError, match="albedo"):
        validate_config(_base(budget={"nucleus": {"absolute_magnitude": 18.0}}))


def test_exponent_numbers_that_yaml_1_1_leaves_as_text_are_read_as_numbers():
    # YAML 1.2 (core schema) reads '2e-6' as a float; PyYAML (YAML 1.1) as a string: gasledger reads it as the
    # number where the schema expects a number, and nowhere else (a cube id '1e5' stays text)
    config = yaml.safe_load("budget: {acceleration_m_s2: [2e-6, 3e-7]}\napertures_km: [1e3, 3000]\n")
    assert config["budget"]["acceleration_m_s2"] == ["2e-6", "3e-7"]          # what a YAML 1.1 loader gives
    config.update(_base(cubes=[{"path": "a.fits", "id": "1e5"}]))
    config = validate_config(config)
    assert config["budget"]["acceleration_m_s2"] == [2e-6, 3e-7] and config["apertures_km"] == [1000.0, 3000]
    assert config["cubes"][0]["id"] == "1e5"
    with pytest.raises(ConfigError, match=r"key apertures_km\[0\] = 'big' is not valid"):
        validate_config(_base(apertures_km=["big"]))


def test_a_tracer_must_be_a_measured_species():
    with pytest.raises(ConfigError, match=r"budget\.water_from_tracers\[0\]\.species = 'CH3OH' is not among the "
                                          r"campaign's species"):
        validate_config(_base(budget={"water_from_tracers": [{"species": "CH3OH", "abundance": [0.01, 0.05],
                                                               "ref": "r"}]}))


@pytest.mark.parametrize("changes, key", [
    ({"budget": {"nucleus": {"radius_km": [0.6, 0.15]}}}, r"budget\.nucleus\.radius_km = \[0\.6, 0\.15\]"),
    ({"budget": {"water_from_tracers": [{"species": "HCN", "abundance": [0.01, 0.001], "ref": "r"}]}},
     r"budget\.water_from_tracers\[0\]\.abundance = \[0\.01, 0\.001\]"),
])
def test_a_range_given_high_to_low_is_refused(changes, key):
    with pytest.raises(ConfigError, match=key + r" is a range given high to low; expected \[min, max\]"):
        validate_config(_base(**changes))


@pytest.mark.parametrize("item_indent", [0, 2])
def test_adding_cubes_keeps_the_users_comments(tmp_path, item_indent):
    from pipeline.settings import append_cubes

    for name in ("a.fits", "b.fits", "e.ecsv"):
        (tmp_path / name).write_text("x")
    pad = " " * item_indent
    text = (f"# my campaign: a comment to keep\ntarget:\n  ephemeris: {tmp_path}/e.ecsv\ncubes:\n{pad}# first night\n"
            f"{pad}- path: {tmp_path}/a.fits   # the good one\n{pad}  id: a\n\nspecies: [HCN]   # only HCN\n")
    (tmp_path / "c.yaml").write_text(text)
    append_cubes(tmp_path / "c.yaml", [{"path": str(tmp_path / "b.fits"), "id": "b", "epoch": "e5"}])
    out = (tmp_path / "c.yaml").read_text()
    for comment in ("# my campaign: a comment to keep", "# first night", "# the good one", "# only HCN"):
        assert comment in out
    config = yaml.safe_load(out)
    assert [c["id"] for c in config["cubes"]] == ["a", "b"] and config["cubes"][1]["epoch"] == "e5"
    assert config["species"] == ["HCN"]
    # a flow-style list cannot take a block item: the file is rewritten as plain YAML, still complete
    (tmp_path / "f.yaml").write_text(f"target: {{ephemeris: {tmp_path}/e.ecsv}}\ncubes: [{{path: {tmp_path}/a.fits}}]\n"
                                     "species: [HCN]\n")
    append_cubes(tmp_path / "f.yaml", [{"path": str(tmp_path / "b.fits"), "id": "b"}])
    assert [c.get("id") for c in yaml.safe_load((tmp_path / "f.yaml").read_text())["cubes"]] == [None, "b"]


def test_species_names_match_the_catalogue_whatever_their_case():
    from pipeline.catalogue import load_catalogue

    config = validate_config(_base(species=["hcn", "Co", "ch3oh"], budget={
        "drivers": ["h2o", "CO"], "water_from_tracers": [{"species": "Hcn", "abundance": [1e-3, 2e-3], "ref": "x"}]}))
    assert config["species"] == ["HCN", "CO", "CH3OH"]
    assert config["budget"]["drivers"] == ["H2O", "CO"]
    assert config["budget"]["water_from_tracers"][0]["species"] == "HCN"
    # a name matching nothing is left for the catalogue's refusal with its closest suggestion
    config = validate_config(_base(species=["C0"]))
    assert config["species"] == ["C0"]
    with pytest.raises(ValueError, match="did you mean 'CO'"):
        load_catalogue().get_species(config["species"][0])


def test_budget_missing_and_defaulted_inputs_are_named():
    from pipeline.settings import Settings

    plain = Settings.from_config(validate_config(_base())).budget
    assert len(plain.missing) == 1 and "budget.acceleration_m_s2" in plain.missing[0]
    assert plain.missing[0].startswith("no verdict will be computed")
    assert len(plain.defaulted) == 1 and "budget.nucleus.radius_km" in plain.defaulted[0]
    given = Settings.from_config(validate_config(_base(budget={"acceleration_m_s2": [2e-6, 3e-7],
                                                               "nucleus": {"radius_km": [0.15, 0.6]}}))).budget
    assert given.missing == () and given.defaulted == ()
    by_mass = Settings.from_config(validate_config(_base(budget={"nongrav": {"A1": 1e-8, "A2": 0, "A3": 0},
                                                                 "nucleus": {"mass_kg": [1e10, 1e12]}}))).budget
    assert by_mass.missing == () and by_mass.defaulted == ()
