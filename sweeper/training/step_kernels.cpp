// One recurrent layer over a window, forward and backward, compiled (training/compiled_steps.py
// builds and loads this file; gru_window.py and elman_window.py call it once each way).
//
// Row-major, time-first buffers as the Python side lays them out: inputs x [T*B, F], gates
// [T, B, 3H], states [T+1, B, H] (h0, then every step's h), weights as nn.GRU / nn.RNN store
// them (W_ih [G*H, F], W_hh [G*H, H]). The matrix products go to the BLAS sgemm_ / dgemm_ that
// torch itself links (their addresses are handed in once by sweeper_set_gemm): the window's
// input products in one product, per step one recurrent product and one fused loop each way,
// and each weight's gradient in one product over the window.
//
// Only the C library is used, so the file compiles in about a second without torch's headers.

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstring>

namespace {

using sgemm_fn = void (*)(const char*, const char*, const int*, const int*, const int*,
                          const float*, const float*, const int*, const float*, const int*,
                          const float*, float*, const int*);
using dgemm_fn = void (*)(const char*, const char*, const int*, const int*, const int*,
                          const double*, const double*, const int*, const double*, const int*,
                          const double*, double*, const int*);

sgemm_fn sgemm = nullptr;
dgemm_fn dgemm = nullptr;

// Fortran BLAS is column-major; a row-major [M, N] matrix is its column-major transpose.
void gemm(char ta, char tb, int m, int n, int k, float beta, const float* a, int lda,
          const float* b, int ldb, float* c, int ldc) {
    const float one = 1.0f;
    sgemm(&ta, &tb, &m, &n, &k, &one, a, &lda, b, &ldb, &beta, c, &ldc);
}

void gemm(char ta, char tb, int m, int n, int k, double beta, const double* a, int lda,
          const double* b, int ldb, double* c, int ldc) {
    const double one = 1.0;
    dgemm(&ta, &tb, &m, &n, &k, &one, a, &lda, b, &ldb, &beta, c, &ldc);
}

// row-major c[rows, cols] = beta * c + a[rows, inner] w[cols, inner]^T   (x W^T)
template <typename T>
void times_transposed(int rows, int cols, int inner, const T* a, const T* w, T* c, T beta) {
    gemm('T', 'N', cols, rows, inner, beta, w, inner, a, inner, c, cols);
}

// row-major c[rows, cols] = beta * c + a[rows, inner] w[inner, cols]   (d W)
template <typename T>
void times(int rows, int cols, int inner, const T* a, const T* w, T* c, T beta) {
    gemm('N', 'N', cols, rows, inner, beta, w, cols, a, inner, c, cols);
}

// e^x for float32 in plain arithmetic, so the compiler vectorises the loops that call it:
// x = n ln2 + r with |r| <= ln2 / 2 (Cody-Waite reduction, ln2 split as in Cephes' expf),
// e^r by its Taylor polynomial to degree 7 (error below 2e-8 relative there), 2^n from the
// exponent bits. Clamped to the normal range; NaN stays NaN.
inline float exp_of(float x) {
    x = x < -87.0f ? -87.0f : x;
    x = x > 88.0f ? 88.0f : x;
    const float shift = 12582912.0f;  // 1.5 * 2^23: adding it rounds to an integer
    float n = (x * 1.44269504088896341f + shift) - shift;
    n = n == n ? n : 0.0f;
    float r = x - n * 0.693359375f;
    r = r - n * -2.12194440e-4f;
    float p = 1.0f / 5040.0f;
    p = p * r + 1.0f / 720.0f;
    p = p * r + 1.0f / 120.0f;
    p = p * r + 1.0f / 24.0f;
    p = p * r + 1.0f / 6.0f;
    p = p * r + 0.5f;
    p = p * r + 1.0f;
    p = p * r + 1.0f;
    const std::int32_t bits = (static_cast<std::int32_t>(n) + 127) << 23;
    float scale;
    std::memcpy(&scale, &bits, sizeof scale);
    return p * scale;
}

inline double exp_of(double x) { return std::exp(x); }

template <typename T>
inline T sigmoid(T x) {
    return T(1) / (T(1) + exp_of(-x));
}

// tanh for float32: below |x| = 0.625 the odd minimax polynomial of Cephes' tanhf (its
// coefficients as recalled from memory, checked against torch.tanh by the tests), above it
// 1 - 2 / (e^{2|x|} + 1) with the sign of x.
inline float tanh_of(float x) {
    const float a = std::fabs(x);
    const float z = x * x;
    float small = -5.70498872745e-3f;
    small = small * z + 2.06390887954e-2f;
    small = small * z - 5.37397155531e-2f;
    small = small * z + 1.33314422036e-1f;
    small = small * z - 3.33332819422e-1f;
    small = small * z * x + x;
    const float big = std::copysign(1.0f - 2.0f / (exp_of(2.0f * a) + 1.0f), x);
    return a < 0.625f ? small : big;
}

inline double tanh_of(double x) { return std::tanh(x); }

// One sample's GRU gates at one step (a loop the compiler vectorises; restrict parameters
// tell it that the rows do not overlap).
template <typename T>
inline void gru_gates(std::ptrdiff_t hidden, T* __restrict__ g_r, T* __restrict__ g_z,
                      T* __restrict__ g_n, const T* __restrict__ rc_r,
                      const T* __restrict__ rc_z, const T* __restrict__ rc_n,
                      const T* __restrict__ b_hn, const T* __restrict__ before,
                      T* __restrict__ p, T* __restrict__ o) {
    for (std::ptrdiff_t j = 0; j < hidden; ++j) {
        const T r = sigmoid(g_r[j] + rc_r[j]);
        const T z = sigmoid(g_z[j] + rc_z[j]);
        const T product = rc_n[j] + b_hn[j];
        const T n = tanh_of(g_n[j] + r * product);
        g_r[j] = r;
        g_z[j] = z;
        g_n[j] = n;
        p[j] = product;
        o[j] = n + z * (before[j] - n);
    }
}

// One sample's gate gradients at one step: d_r, d_z the pre-activations', d_p n's recurrent
// product's; dh (the gradient reaching h_t) becomes n's pre-activation gradient; the direct
// path z * dh goes to the previous state's gradient (written when first, else added).
template <typename T>
inline void gru_gate_grads(std::ptrdiff_t hidden, bool first, const T* __restrict__ g_r,
                           const T* __restrict__ g_z, const T* __restrict__ g_n,
                           const T* __restrict__ p, const T* __restrict__ prev,
                           T* __restrict__ dh, T* __restrict__ d_r, T* __restrict__ d_z,
                           T* __restrict__ d_p, T* __restrict__ earlier) {
    for (std::ptrdiff_t j = 0; j < hidden; ++j) {
        const T r = g_r[j], z = g_z[j], n = g_n[j], grad = dh[j];
        const T d_n = grad * (T(1) - z) * (T(1) - n * n);
        d_r[j] = d_n * p[j] * r * (T(1) - r);
        d_z[j] = grad * (prev[j] - n) * z * (T(1) - z);
        d_p[j] = d_n * r;
        earlier[j] = first ? grad * z : earlier[j] + grad * z;
        dh[j] = d_n;
    }
}

// Column sums of a row-major [rows, cols] matrix into out[cols] (a bias's gradient).
template <typename T>
void column_sums(std::ptrdiff_t rows, std::ptrdiff_t cols, const T* m, T* __restrict__ out) {
    for (std::ptrdiff_t j = 0; j < cols; ++j) out[j] = T(0);
    for (std::ptrdiff_t r = 0; r < rows; ++r) {
        const T* __restrict__ row = m + r * cols;
        for (std::ptrdiff_t j = 0; j < cols; ++j) out[j] += row[j];
    }
}

// The input products of a whole window, x [T*B, F] times W_ih^T [F, G*H], plus a bias row.
template <typename T>
void input_products(std::ptrdiff_t rows, int cols, int features, const T* x, const T* w_ih,
                    const T* bias_a, const T* bias_b, int bias_b_cols, T* out) {
    times_transposed(int(rows), cols, features, x, w_ih, out, T(0));
    for (std::ptrdiff_t r = 0; r < rows; ++r) {
        T* __restrict__ row = out + r * cols;
        for (int j = 0; j < bias_b_cols; ++j) row[j] += bias_a[j] + bias_b[j];
        for (int j = bias_b_cols; j < cols; ++j) row[j] += bias_a[j];
    }
}

// d_h[t, b] = d_out[t, b] (strided: the output's gradient may be a transposed view), and the
// last state's gradient added to the last step.
template <typename T>
void gather_output_grads(int steps, int batch, int hidden, const T* d_out, long stride_t,
                         long stride_b, const T* d_last, T* d_h) {
    for (int t = 0; t < steps; ++t)
        for (int b = 0; b < batch; ++b) {
            const T* __restrict__ from = d_out + t * stride_t + b * stride_b;
            T* __restrict__ to = d_h + (std::ptrdiff_t(t) * batch + b) * hidden;
            for (int j = 0; j < hidden; ++j) to[j] = from[j];
        }
    T* __restrict__ last = d_h + std::ptrdiff_t(steps - 1) * batch * hidden;
    for (std::ptrdiff_t i = 0; i < std::ptrdiff_t(batch) * hidden; ++i) last[i] += d_last[i];
}

// A layer's recurrent weight gradients from its recurrent products' gradients d_rec
// [T*B, G*H] and the states the steps started from (states[0 .. T-1], [T*B, H]): row-major
// d_w_hh = d_rec^T states, one product (column-major: d_w_hh^T = states^T d_rec).
template <typename T>
void recurrent_weight_grads(std::ptrdiff_t rows, int gates_hidden, int hidden, const T* d_rec,
                            const T* states, T* d_w_hh, T* d_b_hh) {
    gemm('N', 'T', hidden, gates_hidden, int(rows), T(0), states, hidden, d_rec, gates_hidden,
         d_w_hh, hidden);
    column_sums(rows, gates_hidden, d_rec, d_b_hh);
}

// The input weights' and inputs' gradients from the input products' gradients d_in
// [T*B, G*H] and the inputs x [T*B, F]; d_x may be null (inputs that need none).
template <typename T>
void input_weight_grads(std::ptrdiff_t rows, int gates_hidden, int features, const T* d_in,
                        const T* x, const T* w_ih, T* d_x, T* d_w_ih, T* d_b_ih) {
    gemm('N', 'T', features, gates_hidden, int(rows), T(0), x, features, d_in, gates_hidden,
         d_w_ih, features);
    column_sums(rows, gates_hidden, d_in, d_b_ih);
    if (d_x) times(int(rows), features, gates_hidden, d_in, w_ih, d_x, T(0));
}

// GRU (nn.GRU's equations and gate order r, z, n) over a window. x [T*B, F]; out: gates
// [T, B, 3H] (r, z, n after their nonlinearities), products [T, B, H] (h W_hn^T + b_hn),
// states [T+1, B, H] (h0, then every step's h), last [B, H]; rec is scratch [B, 3H].
template <typename T>
void gru_forward(int steps, int batch, int hidden, int features, const T* x, const T* w_ih,
                 const T* b_ih, const T* w_hh, const T* b_hh, const T* h0, T* gates,
                 T* products, T* states, T* last, T* rec) {
    const std::ptrdiff_t g3 = 3 * hidden, bh = std::ptrdiff_t(batch) * hidden, bg3 = batch * g3;
    input_products(steps * std::ptrdiff_t(batch), 3 * hidden, features, x, w_ih, b_ih, b_hh,
                   2 * hidden, gates);
    std::memcpy(states, h0, sizeof(T) * bh);
    const T* b_hn = b_hh + 2 * hidden;
    for (int t = 0; t < steps; ++t) {
        const T* h = states + t * bh;
        T* out = states + (t + 1) * bh;
        times_transposed(batch, 3 * hidden, hidden, h, w_hh, rec, T(0));
        for (int b = 0; b < batch; ++b) {
            T* g = gates + t * bg3 + b * g3;
            const T* rc = rec + b * g3;
            gru_gates(hidden, g, g + hidden, g + 2 * hidden, rc, rc + hidden, rc + 2 * hidden,
                      b_hn, h + b * hidden, products + t * bh + b * hidden, out + b * hidden);
        }
    }
    std::memcpy(last, states + steps * bh, sizeof(T) * bh);
}

// GRU backward through the window: the reverse steps (d_h, scratch [T, B, H], is each step's
// whole state gradient, then n's pre-activation gradient; d_rec [T, B, 3H] the recurrent
// products' gradients), then every weight's gradient; d_x may be null; carry = d h0.
template <typename T>
void gru_backward(int steps, int batch, int hidden, int features, const T* x, const T* w_ih,
                  const T* w_hh, const T* gates, const T* products, const T* states,
                  const T* d_out, long stride_t, long stride_b, const T* d_last, T* d_h,
                  T* d_rec, T* d_x, T* d_w_ih, T* d_b_ih, T* d_w_hh, T* d_b_hh, T* carry) {
    const std::ptrdiff_t g3 = 3 * hidden, bh = std::ptrdiff_t(batch) * hidden, bg3 = batch * g3;
    gather_output_grads(steps, batch, hidden, d_out, stride_t, stride_b, d_last, d_h);
    for (int t = steps - 1; t >= 0; --t) {
        const T* before = states + t * bh;
        T* earlier = t ? d_h + (t - 1) * bh : carry;
        const bool first = t == 0;  // carry starts empty; d_h[t - 1] holds d out[t - 1]
        for (int b = 0; b < batch; ++b) {
            const T* g = gates + t * bg3 + b * g3;
            T* d = d_rec + t * bg3 + b * g3;
            gru_gate_grads(hidden, first, g, g + hidden, g + 2 * hidden,
                           products + t * bh + b * hidden, before + b * hidden,
                           d_h + t * bh + b * hidden, d, d + hidden, d + 2 * hidden,
                           earlier + b * hidden);
        }
        times(batch, hidden, 3 * hidden, d_rec + t * bg3, w_hh, earlier, T(1));
    }
    const std::ptrdiff_t rows = std::ptrdiff_t(steps) * batch;
    recurrent_weight_grads(rows, 3 * hidden, hidden, d_rec, states, d_w_hh, d_b_hh);
    // the input products' gradients: the recurrent ones, but n's is not scaled by r
    for (std::ptrdiff_t r = 0; r < rows; ++r) {
        T* __restrict__ to = d_rec + r * g3 + 2 * hidden;
        const T* __restrict__ from = d_h + r * hidden;
        for (int j = 0; j < hidden; ++j) to[j] = from[j];
    }
    input_weight_grads(rows, 3 * hidden, features, d_rec, x, w_ih, d_x, d_w_ih, d_b_ih);
}

// Elman (nn.RNN, tanh) over a window: states [T+1, B, H] (h0, then every h), last [B, H].
template <typename T>
void elman_forward(int steps, int batch, int hidden, int features, const T* x, const T* w_ih,
                   const T* b_ih, const T* w_hh, const T* b_hh, const T* h0, T* states,
                   T* last) {
    const std::ptrdiff_t bh = std::ptrdiff_t(batch) * hidden;
    input_products(steps * std::ptrdiff_t(batch), hidden, features, x, w_ih, b_ih, b_hh, hidden,
                   states + bh);
    std::memcpy(states, h0, sizeof(T) * bh);
    for (int t = 0; t < steps; ++t) {
        T* __restrict__ o = states + (t + 1) * bh;
        times_transposed(batch, hidden, hidden, states + t * bh, w_hh, o, T(1));
        for (std::ptrdiff_t i = 0; i < bh; ++i) o[i] = tanh_of(o[i]);
    }
    std::memcpy(last, states + steps * bh, sizeof(T) * bh);
}

// Elman backward: d_pre [T, B, H] (scratch) becomes each step's pre-activation gradient, the
// gradient of both products (so both biases get the same); d_x may be null; carry = d h0.
template <typename T>
void elman_backward(int steps, int batch, int hidden, int features, const T* x, const T* w_ih,
                    const T* w_hh, const T* states, const T* d_out, long stride_t,
                    long stride_b, const T* d_last, T* d_pre, T* d_x, T* d_w_ih, T* d_b_ih,
                    T* d_w_hh, T* d_b_hh, T* carry) {
    const std::ptrdiff_t bh = std::ptrdiff_t(batch) * hidden;
    gather_output_grads(steps, batch, hidden, d_out, stride_t, stride_b, d_last, d_pre);
    for (int t = steps - 1; t >= 0; --t) {
        T* __restrict__ d = d_pre + t * bh;
        const T* __restrict__ o = states + (t + 1) * bh;
        for (std::ptrdiff_t i = 0; i < bh; ++i) d[i] *= T(1) - o[i] * o[i];
        if (t)
            times(batch, hidden, hidden, d, w_hh, d_pre + (t - 1) * bh, T(1));
        else
            times(batch, hidden, hidden, d, w_hh, carry, T(0));
    }
    const std::ptrdiff_t rows = std::ptrdiff_t(steps) * batch;
    recurrent_weight_grads(rows, hidden, hidden, d_pre, states, d_w_hh, d_b_hh);
    input_weight_grads(rows, hidden, features, d_pre, x, w_ih, d_x, d_w_ih, d_b_ih);
}

// Optimizer updates, one parameter tensor a call, with torch's formulas (torch.optim docs;
// checked against torch's single-tensor implementations by the tests). step is the
// parameter's float32 step count, advanced here; weight decay is added to the gradient.
template <typename T>
void adam_update(std::ptrdiff_t count, T* __restrict__ p, const T* __restrict__ g,
                 T* __restrict__ m, T* __restrict__ v, float* step, double lr, double beta1,
                 double beta2, double eps, double decay) {
    step[0] += 1.0f;
    const double bias1 = 1.0 - std::pow(beta1, double(step[0]));
    const double bias2 = std::sqrt(1.0 - std::pow(beta2, double(step[0])));
    const T size = T(lr / bias1), root2 = T(bias2), b1 = T(1.0 - beta1), b2 = T(beta2);
    const T keep2 = T(1.0 - beta2), e = T(eps), d = T(decay);
    for (std::ptrdiff_t i = 0; i < count; ++i) {
        const T grad = g[i] + d * p[i];
        m[i] += b1 * (grad - m[i]);
        v[i] = v[i] * b2 + keep2 * grad * grad;
        p[i] -= size * m[i] / (std::sqrt(v[i]) / root2 + e);
    }
}

template <typename T>
void rmsprop_update(std::ptrdiff_t count, T* __restrict__ p, const T* __restrict__ g,
                    T* __restrict__ v, T* __restrict__ buffer, float* step, double lr,
                    double alpha, double eps, double decay, double momentum) {
    step[0] += 1.0f;
    const T a = T(alpha), keep = T(1.0 - alpha), e = T(eps), d = T(decay), rate = T(lr);
    const T mu = T(momentum);
    for (std::ptrdiff_t i = 0; i < count; ++i) {
        const T grad = g[i] + d * p[i];
        v[i] = v[i] * a + keep * grad * grad;
        const T scaled = grad / (std::sqrt(v[i]) + e);
        if (buffer) {
            buffer[i] = buffer[i] * mu + scaled;
            p[i] -= rate * buffer[i];
        } else {
            p[i] -= rate * scaled;
        }
    }
}

// SGD with momentum (no dampening): the first step's buffer is the gradient itself
template <typename T>
void sgd_update(std::ptrdiff_t count, T* __restrict__ p, const T* __restrict__ g,
                T* __restrict__ buffer, int first, double lr, double decay, double momentum) {
    const T d = T(decay), rate = T(lr), mu = T(momentum);
    for (std::ptrdiff_t i = 0; i < count; ++i) {
        T grad = g[i] + d * p[i];
        if (buffer) {
            buffer[i] = first ? grad : buffer[i] * mu + grad;
            grad = buffer[i];
        }
        p[i] -= rate * grad;
    }
}

template <typename T>
void activation_table(std::ptrdiff_t count, const T* x, T* y, int which) {
    if (which == 0)
        for (std::ptrdiff_t i = 0; i < count; ++i) y[i] = exp_of(x[i]);
    else if (which == 1)
        for (std::ptrdiff_t i = 0; i < count; ++i) y[i] = tanh_of(x[i]);
    else
        for (std::ptrdiff_t i = 0; i < count; ++i) y[i] = sigmoid(x[i]);
}

}  // namespace

// One entry point per cell, direction and dtype; the Python side passes sizes, then strides
// (backward), then every buffer, in the order of the templates above.
#define SWEEPER_ENTRIES(T, SUFFIX)                                                            \
    void sweeper_gru_forward_##SUFFIX(int steps, int batch, int hidden, int features,         \
                                      const T* x, const T* w_ih, const T* b_ih,               \
                                      const T* w_hh, const T* b_hh, const T* h0, T* gates,    \
                                      T* products, T* states, T* last, T* rec) {              \
        gru_forward(steps, batch, hidden, features, x, w_ih, b_ih, w_hh, b_hh, h0, gates,     \
                    products, states, last, rec);                                             \
    }                                                                                         \
    void sweeper_gru_backward_##SUFFIX(                                                       \
        int steps, int batch, int hidden, int features, long stride_t, long stride_b,         \
        const T* x, const T* w_ih, const T* w_hh, const T* gates, const T* products,          \
        const T* states, const T* d_out, const T* d_last, T* d_h, T* d_rec, T* d_x,           \
        T* d_w_ih, T* d_b_ih, T* d_w_hh, T* d_b_hh, T* carry) {                               \
        gru_backward(steps, batch, hidden, features, x, w_ih, w_hh, gates, products, states,  \
                     d_out, stride_t, stride_b, d_last, d_h, d_rec, d_x, d_w_ih, d_b_ih,      \
                     d_w_hh, d_b_hh, carry);                                                  \
    }                                                                                         \
    void sweeper_elman_forward_##SUFFIX(int steps, int batch, int hidden, int features,       \
                                        const T* x, const T* w_ih, const T* b_ih,             \
                                        const T* w_hh, const T* b_hh, const T* h0,            \
                                        T* states, T* last) {                                 \
        elman_forward(steps, batch, hidden, features, x, w_ih, b_ih, w_hh, b_hh, h0, states,  \
                      last);                                                                  \
    }                                                                                         \
    void sweeper_elman_backward_##SUFFIX(                                                     \
        int steps, int batch, int hidden, int features, long stride_t, long stride_b,         \
        const T* x, const T* w_ih, const T* w_hh, const T* states, const T* d_out,            \
        const T* d_last, T* d_pre, T* d_x, T* d_w_ih, T* d_b_ih, T* d_w_hh, T* d_b_hh,        \
        T* carry) {                                                                           \
        elman_backward(steps, batch, hidden, features, x, w_ih, w_hh, states, d_out,          \
                       stride_t, stride_b, d_last, d_pre, d_x, d_w_ih, d_b_ih, d_w_hh,        \
                       d_b_hh, carry);                                                        \
    }

extern "C" {

void sweeper_set_gemm(void* s, void* d) {
    sgemm = reinterpret_cast<sgemm_fn>(s);
    dgemm = reinterpret_cast<dgemm_fn>(d);
}

SWEEPER_ENTRIES(float, f32)
SWEEPER_ENTRIES(double, f64)

#define SWEEPER_UPDATES(T, SUFFIX)                                                            \
    void sweeper_adam_##SUFFIX(std::ptrdiff_t count, T* p, const T* g, T* m, T* v,            \
                               float* step, double lr, double beta1, double beta2,            \
                               double eps, double decay) {                                    \
        adam_update(count, p, g, m, v, step, lr, beta1, beta2, eps, decay);                   \
    }                                                                                         \
    void sweeper_rmsprop_##SUFFIX(std::ptrdiff_t count, T* p, const T* g, T* v, T* buffer,    \
                                  float* step, double lr, double alpha, double eps,           \
                                  double decay, double momentum) {                            \
        rmsprop_update(count, p, g, v, buffer, step, lr, alpha, eps, decay, momentum);        \
    }                                                                                         \
    void sweeper_sgd_##SUFFIX(std::ptrdiff_t count, T* p, const T* g, T* buffer, int first,   \
                              double lr, double decay, double momentum) {                     \
        sgd_update(count, p, g, buffer, first, lr, decay, momentum);                          \
    }

SWEEPER_UPDATES(float, f32)
SWEEPER_UPDATES(double, f64)

// the float32 nonlinearities alone (0: exp, 1: tanh, 2: sigmoid), for the tests
void sweeper_activation_f32(std::ptrdiff_t count, const float* x, float* y, int which) {
    activation_table(count, x, y, which);
}

}  // extern "C"
