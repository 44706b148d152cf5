"""Plain NumPy twin of the kernels, node by node: the oracle for tests and the text for readers.

Legend: N nodes, d vector size, D = 2d, C classes, |V| vocabulary size.

Same math as tree_compose.py + node_classifier.py (RNTN, 2013), written the
direct way: no levels, no symmetric layout, one node at a time in post-order for
the forward pass and in reverse post-order for the backward pass.

    leaf:      p = L[w]
    internal:  x = [p_l ; p_r];  p = tanh(W x + b + h),  h_k = x^T V[k] x  (h = 0 for the RNN)
    all nodes: y = softmax(Ws p + bs);  loss = scale * sum_labelled -w[t] log y[t]   (w: class weights, 1 by default)

    ds = scale * w[t] * (y - onehot(t)) (0 when unlabelled)
    dWs += ds p^T;  dbs += ds;  e = Ws^T ds + (error from the parent)
    internal: delta = e * (1 - p^2);  dW += delta x^T;  db += delta;  dV[k] += delta_k x x^T
              e_x = W^T delta + sum_k delta_k (V[k] + V[k]^T) x;  left gets e_x[:d], right e_x[d:]
    leaf:     dL[w] += e

The tensor term of one level (kernels/tensor_term.py) has its own twin,
reference_tensor_term and reference_tensor_input_gradient, node by node and k by k.

The MV-RNN's twin (reference_forward_mv, reference_backward_mv: MV-RNN,
2012; numba kernels in compose_matrix_vector.py) follows at the end, with its equations.
"""

from __future__ import annotations

import numpy as np


def _weight_of(class_weight, C):
    """(C,) class weights: ones when none are given (the plain cross-entropy)."""
    return np.ones(C) if class_weight is None else np.asarray(class_weight, dtype=np.float64)


def reference_forward(L, W, b, V, Ws, bs, word, left, right, label, scale, class_weight=None):
    """Returns (P (N, d), Y (N, C), loss). V is None for the RNN; class_weight (C,) or None (all 1)."""
    w = _weight_of(class_weight, Ws.shape[0])
    N = word.shape[0]
    d = L.shape[1]
    P = np.zeros((N, d), dtype=L.dtype)
    Y = np.zeros((N, Ws.shape[0]), dtype=L.dtype)
    loss = 0.0
    for i in range(N):
        if left[i] < 0:
            P[i] = L[word[i]]
        else:
            x = np.concatenate([P[left[i]], P[right[i]]])
            z = W @ x + b
            if V is not None:
                z = z + np.array([x @ V[k] @ x for k in range(d)])
            P[i] = np.tanh(z)
        s = Ws @ P[i] + bs
        y = np.exp(s - s.max())
        Y[i] = y / y.sum()
        if label[i] >= 0:
            loss += -w[label[i]] * np.log(Y[i, label[i]])
    return P, Y, scale * loss


def reference_backward(L, W, b, V, Ws, bs, word, left, right, label, scale, P, Y, class_weight=None):
    """Returns a dict of gradients with keys L, W, b, V (or absent for the RNN), Ws, bs."""
    N, d = P.shape
    w = _weight_of(class_weight, Ws.shape[0])
    grads = {"L": np.zeros_like(L), "W": np.zeros_like(W), "b": np.zeros_like(b),
             "Ws": np.zeros_like(Ws), "bs": np.zeros_like(bs)}
    if V is not None:
        grads["V"] = np.zeros_like(V)
    E = np.zeros((N, d), dtype=P.dtype)  # error reaching each node vector from its parent
    for i in range(N - 1, -1, -1):  # reverse post-order: parents before children
        ds = np.zeros(Ws.shape[0], dtype=P.dtype)
        if label[i] >= 0:
            ds = scale * w[label[i]] * Y[i].copy()
            ds[label[i]] -= scale * w[label[i]]
        grads["Ws"] += np.outer(ds, P[i])
        grads["bs"] += ds
        e = Ws.T @ ds + E[i]
        if left[i] < 0:
            grads["L"][word[i]] += e
            continue
        x = np.concatenate([P[left[i]], P[right[i]]])
        delta = e * (1.0 - P[i] * P[i])
        grads["W"] += np.outer(delta, x)
        grads["b"] += delta
        e_x = W.T @ delta
        if V is not None:
            for k in range(d):
                grads["V"][k] += delta[k] * np.outer(x, x)
                e_x = e_x + delta[k] * (V[k] + V[k].T) @ x
        E[left[i]] += e_x[:d]
        E[right[i]] += e_x[d:]
    return grads


# --- the tensor term of one level (RNTN, 2013), twin of tensor_term.py ---
#
#    per node x (D,):  q_k = (V[k] + V[k]^T) x,   h_k = x^T V[k] x           k = 1..d
#    backward:         e_x += sum_k delta_k q_k


def reference_tensor_term(V, X):
    """(Q (n, d*D) with Q[m, k*D:(k+1)*D] = q_k of node m, H (n, d) with H[m, k] = h_k) for X (n, D)."""
    d = V.shape[0]
    D = 2 * d
    Q = np.zeros((X.shape[0], d * D), dtype=X.dtype)
    H = np.zeros((X.shape[0], d), dtype=X.dtype)
    for m, x in enumerate(X):
        for k in range(d):
            Q[m, k * D : (k + 1) * D] = (V[k] + V[k].T) @ x
            H[m, k] = x @ V[k] @ x
    return Q, H


def reference_tensor_input_gradient(V, X, Delta):
    """(n, D): e_x = sum_k delta_k (V[k] + V[k]^T) x per node, from X (n, D) and Delta (n, d)."""
    return np.stack([sum(delta[k] * (V[k] + V[k].T) @ x for k in range(V.shape[0])) for x, delta in zip(X, Delta)])


# --- matrix-vector model (MV-RNN, 2012), twin of compose_matrix_vector.py ---
#
#    leaf:      p = L[w],  P = LM[w]
#    internal:  left (a, A), right (b, B):  x = [B a ; A b];  p = tanh(W x + bias);  P = WM [A ; B]
#    all nodes: y = softmax(Ws p + bs);  loss = scale * sum_labelled -log y[t]
#
#    e = Ws^T ds + (error from the parent);  EP = error from the parent (zero at a root)
#    internal: delta = e * (1 - p^2);  dW += delta x^T;  dbias += delta;  g, h = W^T delta split in halves
#              e_a += B^T g;  EP_B += g a^T;  e_b += A^T h;  EP_A += h b^T
#              dWM += EP [A ; B]^T;  [EP_A ; EP_B] += WM^T EP
#    leaf:     dL[w] += e;  dLM[w] += EP


def reference_forward_mv(L, LM, W, b, WM, Ws, bs, word, left, right, label, scale, class_weight=None):
    """Returns (P (N, d), PM (N, d, d), Y (N, C), loss) of the MV-RNN; class_weight as in reference_forward."""
    w = _weight_of(class_weight, Ws.shape[0])
    N = word.shape[0]
    d = L.shape[1]
    P = np.zeros((N, d), dtype=L.dtype)
    PM = np.zeros((N, d, d), dtype=L.dtype)
    Y = np.zeros((N, Ws.shape[0]), dtype=L.dtype)
    loss = 0.0
    for i in range(N):
        if left[i] < 0:
            P[i], PM[i] = L[word[i]], LM[word[i]]
        else:
            a, A, b_, B = P[left[i]], PM[left[i]], P[right[i]], PM[right[i]]
            P[i] = np.tanh(W @ np.concatenate([B @ a, A @ b_]) + b)
            PM[i] = WM @ np.vstack([A, B])
        s = Ws @ P[i] + bs
        y = np.exp(s - s.max())
        Y[i] = y / y.sum()
        if label[i] >= 0:
            loss += -w[label[i]] * np.log(Y[i, label[i]])
    return P, PM, Y, scale * loss


def reference_backward_mv(L, LM, W, b, WM, Ws, bs, word, left, right, label, scale, P, PM, Y, class_weight=None):
    """Returns a dict of MV-RNN gradients with keys L, LM, W, b, WM, Ws, bs."""
    w = _weight_of(class_weight, Ws.shape[0])
    N, d = P.shape
    grads = {name: np.zeros_like(value) for name, value in
             (("L", L), ("LM", LM), ("W", W), ("b", b), ("WM", WM), ("Ws", Ws), ("bs", bs))}
    E = np.zeros((N, d), dtype=P.dtype)  # error reaching each node vector from its parent
    EM = np.zeros((N, d, d), dtype=P.dtype)  # error reaching each node matrix from its parent
    onehot = np.eye(Ws.shape[0], dtype=P.dtype)
    for i in range(N - 1, -1, -1):  # reverse post-order: parents before children
        # softmax error, 0 if unlabelled
        ds = scale * w[label[i]] * (Y[i] - onehot[label[i]]) if label[i] >= 0 else 0.0 * Y[i]
        grads["Ws"] += np.outer(ds, P[i])
        grads["bs"] += ds
        e = Ws.T @ ds + E[i]
        if left[i] < 0:
            grads["L"][word[i]] += e
            grads["LM"][word[i]] += EM[i]
            continue
        l, r = left[i], right[i]
        a, A, b_, B = P[l], PM[l], P[r], PM[r]
        delta = e * (1.0 - P[i] * P[i])
        grads["W"] += np.outer(delta, np.concatenate([B @ a, A @ b_]))
        grads["b"] += delta
        e_x = W.T @ delta
        g, h = e_x[:d], e_x[d:]
        E[l] += B.T @ g
        EM[r] += np.outer(g, a)
        E[r] += A.T @ h
        EM[l] += np.outer(h, b_)
        grads["WM"] += EM[i] @ np.vstack([A, B]).T
        e_AB = WM.T @ EM[i]
        EM[l] += e_AB[:d]
        EM[r] += e_AB[d:]
    return grads
