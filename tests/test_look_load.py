"""Look loading: defaults, inheritance, overrides and every class of bad input."""

import textwrap
import warnings

import pytest

from splatter.core.errors import LookError, LookWarning
from splatter.look.load import load_look, parse_override
from splatter.look.records import LookSpec, SourceSpec, SwirlSpec, WindSpec


def write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text))
    return path


MINIMAL = """
    [[source]]
    rate = 20
"""


def test_defaults_follow_the_spec(tmp_path):
    look = load_look(write(tmp_path, "harbour_fog.toml", MINIMAL))
    assert isinstance(look, LookSpec)
    assert look.name == "harbour_fog"  # name defaults to the file stem
    assert look.seed == 0
    assert (look.clip.frames, look.clip.fps, look.clip.substeps) == (64, 30.0, 2)
    assert look.clip.integrator == "symplectic" and look.clip.loop == "none"
    assert look.clip.warmup is None  # "auto"
    assert (look.image.width, look.image.height) == (256, 256)
    assert look.camera.eye == (0.0, 0.0, 10.0) and look.camera.view_width == 4.0
    src = look.sources[0]
    assert src.rate == 20.0 and src.life == (2.0, 3.0) and src.spread == 10.0
    assert src.opacity == ((0.0, 0.0), (0.1, 0.5), (1.0, 0.0))
    assert look.output.frames == ("png",) and look.output.png_alpha == "straight"
    assert look.output.dilate is True and look.output.map_frames is False  # extensions: docs/look-reference.md


def test_default_colour_is_the_spec_hex_decoded_to_linear(tmp_path):
    # "#d9d6d0" decoded with IEC 61966-2-1: ((V + 0.055) / 1.055) ** 2.4
    look = load_look(write(tmp_path, "a.toml", MINIMAL))
    want = [((c / 255 + 0.055) / 1.055) ** 2.4 for c in (0xD9, 0xD6, 0xD0)]
    assert look.sources[0].color[0][1] == pytest.approx(want, abs=1e-6)
    assert SourceSpec().color[0][1] == pytest.approx(want, abs=1e-6)


def test_ranges_ramps_and_colours_take_canonical_form(tmp_path):
    look = load_look(
        write(
            tmp_path,
            "a.toml",
            """
            [[source]]
            speed = [0.5, 1.5]
            size = 0.3
            grow = [[0, 1], [1, 3]]
            opacity = 0.4
            color = [[0, "#ffffff"], [1, [0.1, 0.2, 0.3]]]
            stop = "never"
            """,
        )
    )
    s = look.sources[0]
    assert s.speed == (0.5, 1.5) and s.size == (0.3, 0.3)
    assert s.grow == ((0.0, 1.0), (1.0, 3.0)) and s.opacity == ((0.0, 0.4),)
    assert s.color[0][1] == pytest.approx((1.0, 1.0, 1.0)) and s.color[1][1] == (0.1, 0.2, 0.3)
    assert s.stop is None


def test_base_merges_tables_and_replaces_arrays(tmp_path):
    write(
        tmp_path,
        "base.toml",
        """
        seed = 4
        [clip]
        frames = 32
        fps = 24
        [[source]]
        rate = 10
        [[source]]
        rate = 11
        """,
    )
    child = write(
        tmp_path,
        "child.toml",
        """
        base = "base.toml"
        [clip]
        fps = 60
        [[source]]
        rate = 99
        """,
    )
    look = load_look(child)
    assert look.seed == 4 and look.clip.frames == 32 and look.clip.fps == 60.0
    assert [s.rate for s in look.sources] == [99.0]


def test_set_overrides_with_dotted_paths_and_indices(tmp_path):
    path = write(tmp_path, "a.toml", MINIMAL + '\n[[force]]\nkind = "wind"\n')
    look = load_look(
        path,
        overrides=["source.0.rate=80", "clip.frames=32", "force.0.velocity=[2, 0, 0]", "camera.projection=perspective"],
        seed=9,
    )
    assert look.sources[0].rate == 80.0 and look.clip.frames == 32 and look.seed == 9
    assert look.forces == (WindSpec(velocity=(2.0, 0.0, 0.0)),)
    assert look.camera.projection == "perspective"
    assert parse_override("clip.fps=24.5") == (["clip", "fps"], 24.5)


BAD = [
    # (look text, overrides, key named, fragment of the expected part)
    ("[clip]\nframes = 64\nfrmaes = 3\n" + MINIMAL, [], "clip.frmaes", 'did you mean "frames"'),
    ('[clip]\nframes = "many"\n' + MINIMAL, [], "clip.frames", "integer"),
    ("[clip]\nfps = nan\n" + MINIMAL, [], "clip.fps", "finite"),
    ("[clip]\nfps = inf\n" + MINIMAL, [], "clip.fps", "finite"),
    ("[clip]\nfps = -3\n" + MINIMAL, [], "clip.fps", "number"),
    ("[image]\nwidth = 100000\n" + MINIMAL, [], "image.width", "8 to 8192"),
    ('[[source]]\ncolor = "#12345g"\n', [], "source[0].color", "#rrggbb"),
    ('[[source]]\ncolor = "red"\n', [], "source[0].color", "#rrggbb"),
    ('[[source]]\nshape = "cone"\n', [], "source[0].shape", "point"),
    ('[[force]]\nkind = "tornado"\n' + MINIMAL, [], "force[0].kind", "gravity"),
    ("[[force]]\naccel = [0, -1, 0]\n" + MINIMAL, [], "force[0].kind", "required"),
    ('[[obstacle]]\nkind = "plane"\nbounce = 1.5\n' + MINIMAL, [], "obstacle[0].bounce", "0.0 to 1.0"),
    ("[[source]]\nspeed = [2, 1]\n", [], "source[0].speed", "min <= max"),
    ("[[source]]\nopacity = [[0.5, 0.2], [0.1, 0.3]]\n", [], "source[0].opacity", "increasing"),
    ("[[source]]\nrate = 1e9\n", [], "source[0].rate", "100000"),
    ("[[source]]\nrate = true\n", [], "source[0].rate", "number"),
    ('[clip]\nloop = "exat"\n' + MINIMAL, [], "clip.loop", 'did you mean "exact"'),
    ("colour = 3\n" + MINIMAL, [], "colour", "top-level"),
    ('name = "Harbour Fog"\n' + MINIMAL, [], "name", "[a-z0-9_-]+"),
    ("seed = -1\n" + MINIMAL, [], "seed", "integer"),
    ('[output]\ndir = "renders/{nmae}"\n' + MINIMAL, [], "output.dir", "{name}"),
    ("[output]\nsheet = { columns = 2, rows = 2 }\n" + MINIMAL, [], "output.sheet.rows", "columns x rows"),
    ("[output]\nsheet = { columns = 6, pow2 = true }\n" + MINIMAL, [], "output.sheet.columns", "power of two"),
    ('[output]\nstem = "{name}.take"\n' + MINIMAL, [], "output.stem", "no dots"),
    ('[output]\nstem = "takes/{name}"\n' + MINIMAL, [], "output.stem", "{seed}"),
    ('[output]\nstem = "{name}_{frame}"\n' + MINIMAL, [], "output.stem", "{name}"),
    ("[camera]\neye = [0, 0, 0]\n" + MINIMAL, [], "camera.target", "different"),
    ('[output]\nmap_frames = "yes"\n' + MINIMAL, [], "output.map_frames", "true or false"),
    (MINIMAL, ["output.dilate=1"], "output.dilate", "true or false"),
    (MINIMAL, ["clip.frames=0"], "clip.frames", "integer"),
    (MINIMAL, ["source.5.rate=3"], "source.5", "index"),
    (MINIMAL, ["nonsense"], "nonsense", "KEY=VALUE"),
]


@pytest.mark.parametrize("text, overrides, key, fragment", BAD, ids=[b[2] for b in BAD])
def test_bad_input_names_file_key_expected_and_got(tmp_path, text, overrides, key, fragment):
    path = write(tmp_path, "bad.toml", text)
    with pytest.raises(LookError) as info:
        load_look(path, overrides=overrides)
    err = info.value
    assert err.key == key
    assert fragment in err.expected or fragment in err.got
    assert err.file == ("--set" if overrides else str(path))
    assert "got" in str(err) and "expected" in str(err)


def test_broken_toml_reports_its_line(tmp_path):
    path = write(tmp_path, "broken.toml", '[clip]\nframes = 64\nfps = = 30\n')
    with pytest.raises(LookError) as info:
        load_look(path)
    assert info.value.line == 3 and info.value.file == str(path)


def test_missing_base_and_base_cycle(tmp_path):
    with pytest.raises(LookError) as info:
        load_look(write(tmp_path, "a.toml", 'base = "nowhere.toml"\n' + MINIMAL))
    assert info.value.key == "base" and "nowhere.toml" in info.value.got
    write(tmp_path, "x.toml", 'base = "y.toml"\n')
    with pytest.raises(LookError) as info:
        load_look(write(tmp_path, "y.toml", 'base = "x.toml"\n'))
    assert "cycle" in info.value.got


def test_error_in_base_names_the_base_file(tmp_path):
    base = write(tmp_path, "base.toml", "[clip]\nsubsteps = 0\n")
    with pytest.raises(LookError) as info:
        load_look(write(tmp_path, "child.toml", 'base = "base.toml"\n' + MINIMAL))
    assert info.value.key == "clip.substeps"
    assert info.value.file.endswith("base.toml") and "child" not in info.value.file
    assert base.exists()


def test_missing_look_file(tmp_path):
    with pytest.raises(LookError) as info:
        load_look(tmp_path / "absent.toml")
    assert "no file" in info.value.got


def test_absurd_live_puff_count_is_refused(tmp_path):
    path = write(tmp_path, "a.toml", "[[source]]\nrate = 100000\nlife = 100\n")
    with pytest.raises(LookError) as info:
        load_look(path)
    assert info.value.key == "source[0].rate" and "alive at once" in info.value.expected


SWIRL = '[[force]]\nkind = "swirl"\n'


def test_swirl_octaves_default_to_auto(tmp_path):
    # docs/look-reference.md: octaves "auto" (the default) is stored as None for the plan to resolve.
    assert SwirlSpec().octaves is None
    assert load_look(write(tmp_path, "a.toml", SWIRL + MINIMAL)).forces[0].octaves is None
    assert load_look(write(tmp_path, "b.toml", SWIRL + 'octaves = "auto"\n' + MINIMAL)).forces[0].octaves is None
    assert load_look(write(tmp_path, "c.toml", SWIRL + "octaves = 6\n" + MINIMAL)).forces[0].octaves == 6


@pytest.mark.parametrize("value", ['"lots"', "0", "7", "2.5"])
def test_bad_swirl_octaves_are_refused(tmp_path, value):
    # The look contract allows explicit counts 1..6 (docs/look-reference.md); "auto" may go further.
    path = write(tmp_path, "bad.toml", SWIRL + f"octaves = {value}\n" + MINIMAL)
    with pytest.raises(LookError) as info:
        load_look(path)
    assert info.value.key == "force[0].octaves"
    assert "force[0].octaves" in str(info.value)
    assert info.value.expected == '"auto" or an integer from 1 to 6'


def test_false_switches_off_an_inherited_sheet_or_light(tmp_path):
    # look-spec additions: `sheet = false` and `[shading] light = false` switch
    # off what a base look (or an earlier --set) gave; true is not a table.
    base = write(tmp_path, "base.toml", MINIMAL + '[output]\nsheet = { columns = 4 }\n[shading.light]\nintensity = 2\n')
    child = write(tmp_path, "child.toml", 'base = "base.toml"\n[output]\nsheet = false\n[shading]\nlight = false\n')
    assert load_look(base).output.sheet.columns == 4 and load_look(base).shading.light.intensity == 2
    look = load_look(child)
    assert look.output.sheet is None and look.shading.light is None
    assert load_look(base, overrides=["output.sheet=false"]).output.sheet is None
    with pytest.raises(LookError, match=r"output\.sheet: expected a table, or false to switch it off, got boolean true"):
        load_look(base, overrides=["output.sheet=true"])


def test_a_grid_pieced_together_from_several_files_that_leaves_cells_empty_is_warned_about(tmp_path):
    # Tables merge key by key, so a derived `sheet = { columns = 4 }` keeps the base's rows = 8.
    base = write(tmp_path, "base.toml", MINIMAL + "[clip]\nframes = 64\n[output]\nsheet = { columns = 8, rows = 8 }\n")
    child = write(tmp_path, "child.toml", 'base = "base.toml"\n[clip]\nframes = 8\n[output]\nsheet = { columns = 4 }\n')
    with pytest.warns(LookWarning, match=r"4 x 8 cells for 8 frames leaves 24 cells empty") as seen:
        load_look(child)
    assert "child.toml" in str(seen[0].message) and "base.toml" in str(seen[0].message)
    with pytest.warns(LookWarning, match=r"8 x 8 cells for 60 frames"):
        load_look(base, overrides=["clip.frames=60"])
    one = write(tmp_path, "one.toml", MINIMAL + "[clip]\nframes = 60\n[output]\nsheet = { columns = 8, rows = 8 }\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        load_look(base)  # one file's grid, full
        load_look(one)  # one file asks for 4 empty cells: it means it
        load_look(child, overrides=["output.sheet.rows=2"])  # 4 x 2 holds 8 frames exactly
