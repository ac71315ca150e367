"""Solve after setting every demand, from Python: CPU time of the native solve and wall time of
``Model.set_demands`` on the generated 10,000-junction network (figures for benches/RESULTS.md).

    target/release/ringmain generate --junctions 10000 --output /tmp/pb/town.json
    RINGMAIN_LIBRARY=/path/to/other/libringmain.so .venv/bin/python benches/python_setters_before_after.py before
    .venv/bin/python benches/python_setters_before_after.py after

Run it alternately against two builds of the library (``RINGMAIN_LIBRARY`` picks one) to compare
them in the same session. CPU time (``time.process_time``, every thread of the process) is
reported for the solve because wall time on a shared machine follows the other users' load.
"""

import ctypes, statistics, sys, time
import numpy as np
import ringmain
from ringmain import _ffi
m = ringmain.Model.load(sys.argv[2] if len(sys.argv) > 2 else "/tmp/pb/town.json")
m.solve().close()
base = m.demands()
ptr = m._ptr; out = ctypes.c_void_p()
def bare():
    assert _ffi.lib.ringmain_model_solve(ptr, ctypes.byref(out)) == 0
    _ffi.lib.ringmain_results_free(out.value)
ts=[]; tset=[]
for k in range(100):
    t0=time.perf_counter(); m.set_demands(base*(0.8+0.01*k)); tset.append(time.perf_counter()-t0)
    t0=time.process_time(); bare(); ts.append(time.process_time()-t0)
with m.solve() as r: it = r.iterations
print(f"{sys.argv[1]}: solve CPU median {statistics.median(ts)*1e3:.2f} ms, min {min(ts)*1e3:.2f} ms, set_demands median {statistics.median(tset)*1e3:.3f} ms, iterations {it}")
