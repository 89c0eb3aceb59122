"""Bad input from Python raises the right subclass of kernlake.Error with the library's
one-sentence message, and the interpreter survives every case (common practice: typed
errors, never a crash on user input)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest

import kernlake


def _one_sentence(e: BaseException) -> str:
    msg = str(e)
    assert msg and "\n" not in msg
    return msg


def test_the_classes_form_one_family():
    for cls in (kernlake.InputError, kernlake.ModelFileError, kernlake.NumericalError, kernlake.IOError):
        assert issubclass(cls, kernlake.Error)
    assert issubclass(kernlake.IOError, OSError)
    assert issubclass(kernlake.InputError, ValueError)


def test_wrong_dtypes(ccpp_arrays, small_model):
    x, y = ccpp_arrays
    model, _ = small_model
    with pytest.raises(kernlake.InputError, match="dtype int64"):
        kernlake.fit(x.astype(np.int64), y)
    with pytest.raises(kernlake.InputError, match="dtype float32"):
        model.predict(x.astype(np.float32))
    with pytest.raises(kernlake.InputError, match="y has dtype"):
        kernlake.fit(x, y.astype(np.int32))
    text = pa.table({"AT": ["a"], "V": [1.0], "AP": [1.0], "RH": [1.0]})
    with pytest.raises(kernlake.InputError, match="AT") as e:
        model.score(text)
    assert "numeric" in _one_sentence(e.value)


def test_non_contiguous_and_fortran_arrays(ccpp_arrays, small_model):
    x, y = ccpp_arrays
    model, _ = small_model
    with pytest.raises(kernlake.InputError, match="C-contiguous") as e:
        model.predict(np.asfortranarray(x))
    _one_sentence(e.value)
    with pytest.raises(kernlake.InputError, match="C-contiguous"):
        model.predict(x[::2])
    with pytest.raises(kernlake.InputError, match="C-contiguous"):
        kernlake.fit(np.asfortranarray(x), y)
    with pytest.raises(kernlake.InputError, match="C-contiguous"):
        kernlake.fit(x, np.ascontiguousarray(np.column_stack([y, y]))[:, 0])


def test_shapes(ccpp_arrays, small_model):
    x, y = ccpp_arrays
    model, _ = small_model
    with pytest.raises(kernlake.InputError, match="3 column"):
        model.predict(np.ascontiguousarray(x[:, :3]))
    with pytest.raises(kernlake.InputError, match="rows"):
        kernlake.fit(x, y[:-1])
    with pytest.raises(kernlake.InputError, match="dimension"):
        kernlake.fit(x[:, 0].copy(), y)


def test_missing_target_or_feature_column(ccpp_table, ccpp_lake):
    with pytest.raises(kernlake.InputError, match="'nope'") as e:
        kernlake.fit(ccpp_table, "nope", dim=16)
    _one_sentence(e.value)
    with pytest.raises(kernlake.InputError, match="'nope'"):
        kernlake.fit(ccpp_table, "PE", features=["AT", "nope"], dim=16)
    with pytest.raises(kernlake.InputError, match="nope"):
        kernlake.fit(str(ccpp_lake), "nope", dim=16)
    with pytest.raises(kernlake.InputError, match="nope"):
        kernlake.fit(str(ccpp_lake), "PE", features=["nope"], dim=16)


def test_nan_under_each_missing_policy(small_model):
    model, _ = small_model
    t = pa.table({"AT": [10.0, float("nan"), 20.0], "V": [40.0, 41.0, None],
                  "AP": [1010.0, 1011.0, 1012.0], "RH": [70.0, 71.0, 72.0]})
    kept = model.score(t, missing="null")
    assert kept.num_rows == 3
    assert kept.column("prediction").null_count == 2
    skipped = model.score(t, missing="skip")
    assert skipped.num_rows == 1
    with pytest.raises(kernlake.InputError, match="row 2") as e:
        model.score(t, missing="fail")
    assert "AT" in _one_sentence(e.value)
    # rows are numbered in the whole table, across slices
    many = pa.concat_tables([pa.table({"AT": [10.0] * 5, "V": [40.0] * 5, "AP": [1010.0] * 5,
                                       "RH": [70.0] * 5})] * 2 + [t])
    with pytest.raises(kernlake.InputError, match="row 12"):
        model.score(many, missing="fail", batch_rows=3)
    # fitting: skip leaves rows out, fail names the row and column
    fit_rows = pa.table({"x": [float(i) for i in range(40)] + [float("nan")],
                         "y": [float(i % 7) for i in range(41)]})
    kernlake.fit(fit_rows, "y", dim=16, gamma=1.0, c=1.0, epsilon=0.1, missing="skip")
    with pytest.raises(kernlake.InputError, match="row 41, column 'x'"):
        kernlake.fit(fit_rows, "y", dim=16, missing="fail")
    with pytest.raises(kernlake.InputError, match="row 3, column 1"):
        x = np.ones((5, 2))
        x[3, 1] = np.nan
        kernlake.fit(x, np.arange(5.0), dim=16)


def test_model_whose_inputs_the_table_lacks(small_model):
    model, _ = small_model
    with pytest.raises(kernlake.InputError, match="'RH'") as e:
        model.score(pa.table({"AT": [1.0], "V": [1.0], "AP": [1.0]}))
    assert "no such column" in _one_sentence(e.value)


def test_damaged_model_file(small_model, tmp_path):
    model, path = small_model
    data = path.read_bytes()
    broken = tmp_path / "broken.klm"
    broken.write_bytes(data[: len(data) // 2])
    with pytest.raises(kernlake.ModelFileError) as e:
        kernlake.Model.load(broken)
    assert "broken.klm" in _one_sentence(e.value)
    flipped = bytearray(data)
    flipped[len(flipped) // 2] ^= 0xFF
    with pytest.raises(kernlake.ModelFileError):
        kernlake.Model.from_bytes(bytes(flipped))
    with pytest.raises(kernlake.ModelFileError):
        kernlake.Model.from_bytes(b"not a model")
    with pytest.raises(kernlake.IOError):
        kernlake.Model.load(tmp_path / "absent.klm")


def test_objects_that_are_not_tables(small_model):
    model, _ = small_model
    for thing in (42, "text", {"AT": [1.0]}, object()):
        with pytest.raises(kernlake.InputError, match="not a table") as e:
            model.score(thing)
        _one_sentence(e.value)
    with pytest.raises(kernlake.InputError):
        kernlake.fit({"AT": [1.0]}, "PE")
    with pytest.raises(kernlake.InputError):
        model.predict([[1.0, 2.0, 3.0, 4.0]])


def test_bad_settings_are_refused_before_any_data_is_read(ccpp_lake):
    with pytest.raises(kernlake.InputError, match="kernel"):
        kernlake.fit(str(ccpp_lake), "PE", kernel="cubic")
    with pytest.raises(kernlake.InputError, match="loss"):
        kernlake.fit(str(ccpp_lake), "PE", loss="huber")
    with pytest.raises(kernlake.InputError, match="holdout"):
        kernlake.fit(str(ccpp_lake), "PE", holdout=0.9)
    with pytest.raises(kernlake.InputError, match="memory"):
        kernlake.fit(str(ccpp_lake), "PE", memory="lots")
    with pytest.raises(kernlake.InputError, match="missing"):
        kernlake.fit(str(ccpp_lake), "PE", missing="maybe")
    with pytest.raises(kernlake.InputError, match="does not exist"):
        kernlake.fit(str(ccpp_lake / "absent"), "PE")


def test_io_failures(small_model, tmp_path):
    model, _ = small_model
    with pytest.raises(kernlake.IOError) as e:
        model.save(tmp_path / "no" / "such" / "folder" / "m.klm")
    assert "No such file" in _one_sentence(e.value)
    assert isinstance(e.value, OSError)


def test_the_process_survives_and_still_works(small_model, ccpp_arrays):
    model, _ = small_model
    x, _ = ccpp_arrays
    assert np.isfinite(model.predict(x[:10])).all()
