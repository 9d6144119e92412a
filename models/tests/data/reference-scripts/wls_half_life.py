# Reference values of models/tests/wear_fit_paths.rs (each_component_fits_with_its_own_recency_half_life):
# weighted least squares through the origin, weights 2^(-age/h), with numpy (run: python3 wls_half_life.py).
import numpy as np
day = np.array([19100., 19300., 19500., 19700.])
x = np.array([4000., 11000., 18500., 26000.])
y = 30.0 - np.array([29.6, 29.1, 28.4, 28.0])
for name, h in [("rotor", 730.0), ("pad", 180.0)]:
    w = 2.0 ** (-(day.max() - day) / h)
    sw = np.sqrt(w)
    (k,), rss, _, _ = np.linalg.lstsq((sw * x)[:, None], sw * y, rcond=None)
    s2 = rss[0] / (len(x) - 1)
    se = np.sqrt(s2 / np.sum(w * x * x))
    print(name, "k", repr(float(k)), "residual_sd", repr(float(np.sqrt(s2))), "stderr", repr(float(se)))
