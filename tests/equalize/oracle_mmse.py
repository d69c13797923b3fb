#!/usr/bin/python3
"""numpy/scipy oracle for the equalizer tests (run with Debian's /usr/bin/python3).

Builds the second-order statistics of a linear channel x_n = sum_k h_k a_{n-k} + v_n with
i.i.d. +-1 levels and white noise, independently of the C++ code, and solves
  wiener:  R w = P f            (scipy.linalg.solve_toeplitz; Haykin, Adaptive Filter Theory)
  gpr:     Moon & Zeng, IEEE Trans. Magn. 31(2) 1995: M = A - P'R^-1 P,
           g = M^-1 e0 / (e0' M^-1 e0), w = R^-1 P g, mse = 1/(e0' M^-1 e0)
  eig:     the largest and smallest eigenvalue of R (numpy.linalg.eigvalsh)
Usage: oracle_mmse.py MODE N DELAY NOISE_VAR L_OR_TARGET h0 h1 ...
  MODE wiener: L_OR_TARGET is the target as comma-separated taps; prints w..., then mse
  MODE gpr:    L_OR_TARGET is the target length; prints g..., w..., then mse
  MODE eig:    prints lambda_max, lambda_min, trace
"""
import sys

import numpy as np
import scipy.linalg


def stats(h, n, delay, noise_var, l):
    h = np.asarray(h, dtype=float)
    full = np.correlate(h, h, mode="full")  # lag -(len-1) .. len-1
    mid = len(h) - 1
    r = np.array([full[mid + k] if k < len(h) else 0.0 for k in range(n)])
    r[0] += noise_var
    p = np.zeros((n, l))
    for i in range(n):
        for m in range(l):
            idx = delay - i + m
            if 0 <= idx < len(h):
                p[i, m] = h[idx]
    return r, p


def main():
    mode, n, delay, noise_var = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), float(sys.argv[4])
    arg = sys.argv[5]
    h = [float(v) for v in sys.argv[6:]]
    if mode == "wiener":
        f = np.array([float(v) for v in arg.split(",")])
        r, p = stats(h, n, delay, noise_var, len(f))
        pf = p @ f
        w = scipy.linalg.solve_toeplitz(r, pf)
        mse = f @ f - pf @ w  # A = I at the optimum: f'f - (Pf)' R^-1 (Pf)
        print(" ".join(repr(v) for v in list(w) + [mse]))
    elif mode == "gpr":
        l = int(arg)
        r, p = stats(h, n, delay, noise_var, l)
        rinv_p = np.column_stack([scipy.linalg.solve_toeplitz(r, p[:, m]) for m in range(l)])
        m_mat = np.eye(l) - p.T @ rinv_p
        minv_e0 = np.linalg.solve(m_mat, np.eye(l)[0])
        g = minv_e0 / minv_e0[0]
        w = rinv_p @ g
        print(" ".join(repr(v) for v in list(g) + list(w) + [1.0 / minv_e0[0]]))
    elif mode == "eig":
        r, _ = stats(h, n, delay, noise_var, 1)
        ev = np.linalg.eigvalsh(scipy.linalg.toeplitz(r))
        print(repr(ev[-1]), repr(ev[0]), repr(float(np.sum(np.diag(scipy.linalg.toeplitz(r))))))
    else:
        sys.exit("unknown mode " + mode)


if __name__ == "__main__":
    main()
