"""Write .npy fixtures with numpy itself (numpy's format is the reference) and the values
numpy reads back from them, for tests/capture_npy.rs.

Run: /path/to/python tests/reference/make_npy.py   (numpy pinned in requirements.txt)
"""
import json
import pathlib

import numpy as np

out = pathlib.Path(__file__).parent / "npy"
out.mkdir(exist_ok=True)
rng = np.random.default_rng(20261201)

cases = {}

def save(name, arr):
    np.save(out / f"{name}.npy", arr)
    back = np.load(out / f"{name}.npy")
    cases[name] = {
        "dtype": back.dtype.str,
        "fortran_order": bool(np.isfortran(back)) and back.ndim > 1,
        "shape": list(back.shape),
        # values as float64 in C order, as numpy reads them back
        "values": back.astype(np.float64).ravel(order="C").tolist(),
    }

base = rng.standard_normal((7, 5)) * 3.0
save("f16_le", base.astype("<f2"))
save("f32_be", base.astype(">f4"))
save("f64_fortran", np.asfortranarray(base.astype("<f8")))
save("f32_fortran_be", np.asfortranarray(base.astype(">f4")))
stack = rng.standard_normal((3, 6, 4)).astype("<f4")
save("stack_f32", stack)
save("stack_f64_fortran", np.asfortranarray(stack.astype("<f8")))
# special values survive the trip
special = np.array([[0.0, -0.0, 65504.0], [6.1e-5, 1e-7, -2.5]], dtype="<f2")
save("f16_special", special)

(out / "expected.json").write_text(json.dumps({"numpy": np.__version__, "cases": cases}, indent=1))
print("wrote", len(cases), "fixtures to", out)
