# Reference values of models/tests/vehicle_coupling.rs (the_coupling_matches_numpy_on_the_documented_formulas):
# the vehicle pad deviation and the pad-rotor coupling of models/src/pooling.rs, with numpy (run: python3 vehicle_coupling.py).
# The group numbers are invented test data.
import numpy as np
front_mean, rear_mean = 4e-4, 2e-4
front = np.array([3.2, 4.1, 5.0, 3.6, 4.6, 3.9]) * 1e-4
front_var = np.array([4, 5, 3, 6, 4, 5]) * 1e-10
rear = np.array([1.7, 2.2, 2.6, 1.8, 2.3]) * 1e-4   # vehicle 6 has no rear pad fit
rear_var = np.array([2, 3, 2, 2, 3]) * 1e-10
rotor = np.array([2.5, 3.1, 3.9, 2.6, 3.5, 2.9]) * 1e-5
rotor_tau = 1e-5
# Front axle: x = mu_front * mean_b((k_b - mu_b)/mu_b), v = mu_front^2 * sum(v_b/mu_b^2)/n^2
x = np.empty(6); v = np.empty(6)
for i in range(6):
    dev = [(front[i] - front_mean) / front_mean]; var = [front_var[i] / front_mean**2]
    if i < 5:
        dev.append((rear[i] - rear_mean) / rear_mean); var.append(rear_var[i] / rear_mean**2)
    n = len(dev)
    x[i] = front_mean * np.mean(dev); v[i] = front_mean**2 * np.sum(var) / n**2
cov = np.cov(x, rotor, ddof=1)[0, 1]
spread = np.var(x, ddof=1)
tx = np.sqrt(spread - v.mean())
rho = cov / (tx * rotor_tau)
print("x", repr(x)); print("v", repr(v))
print("tx", repr(float(tx)), "rho", repr(float(rho)), "slope", repr(float(rho * rotor_tau / tx)))
