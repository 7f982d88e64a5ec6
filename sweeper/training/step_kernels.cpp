// The step loops of one recurrent layer over a window, compiled (training/compiled_steps.py
// builds and loads this file; gru_window.py and elman_window.py call it).
//
// Row-major, time-first buffers as the Python side lays them out: gates [T, B, 3H], states and
// outputs [T, B, H], weights as nn.GRU / nn.RNN store them (W_hh [G*H, H]). The matrix
// products go to the BLAS sgemm_ / dgemm_ that torch itself links (their addresses are handed
// in once by sweeper_set_gemm); everything between two products is one fused loop, so a GRU
// step is one product and one loop forward, one loop and one product backward.
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

// GRU (nn.GRU's equations and gate order r, z, n). In: gates[t] holds x_t W_ih^T + b_ih with
// b_hr, b_hz added; out: r, z, n after their nonlinearities, products[t] = h W_hn^T + b_hn,
// out[t] = h_t. rec is scratch [B, 3H].
template <typename T>
void gru_forward(int steps, int batch, int hidden, T* gates, const T* h0, const T* w_hh,
                 const T* b_hn, T* products, T* out, T* rec) {
    const std::ptrdiff_t g3 = 3 * hidden, bh = std::ptrdiff_t(batch) * hidden, bg3 = batch * g3;
    const T* h = h0;
    for (int t = 0; t < steps; ++t) {
        times_transposed(batch, 3 * hidden, hidden, h, w_hh, rec, T(0));
        for (int b = 0; b < batch; ++b) {
            T* g = gates + t * bg3 + b * g3;
            const T* rc = rec + b * g3;
            gru_gates(hidden, g, g + hidden, g + 2 * hidden, rc, rc + hidden, rc + 2 * hidden,
                      b_hn, h + b * hidden, products + t * bh + b * hidden,
                      out + t * bh + b * hidden);
        }
        h = out + t * bh;
    }
}

// GRU backward through the window. d_h[t] holds d out[t] (d_last already added to the last
// step); the loop completes it one step ahead of its use and then overwrites it with the
// gradient of n's pre-activation. d_rec[t] gets the gradients of the recurrent products
// (r, z pre-activations; n's product, which r scales). carry = d h0.
template <typename T>
void gru_backward(int steps, int batch, int hidden, const T* gates, const T* products,
                  const T* h0, const T* out, const T* w_hh, T* d_h, T* d_rec, T* carry) {
    const std::ptrdiff_t g3 = 3 * hidden, bh = std::ptrdiff_t(batch) * hidden, bg3 = batch * g3;
    for (int t = steps - 1; t >= 0; --t) {
        const T* before = t ? out + (t - 1) * bh : h0;
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
}

// Elman (nn.RNN, tanh). In: out[t] holds x_t W_ih^T + b_ih + b_hh; becomes h_t.
template <typename T>
void elman_forward(int steps, int batch, int hidden, const T* h0, const T* w_hh, T* out) {
    const std::ptrdiff_t bh = std::ptrdiff_t(batch) * hidden;
    const T* h = h0;
    for (int t = 0; t < steps; ++t) {
        T* __restrict__ o = out + t * bh;
        times_transposed(batch, hidden, hidden, h, w_hh, o, T(1));
        for (std::ptrdiff_t i = 0; i < bh; ++i) o[i] = tanh_of(o[i]);
        h = o;
    }
}

// Elman backward. d_pre[t] holds d out[t] (d_last added to the last step) and becomes the
// gradient of step t's pre-activation; carry = d h0.
template <typename T>
void elman_backward(int steps, int batch, int hidden, const T* out, const T* w_hh, T* d_pre,
                    T* carry) {
    const std::ptrdiff_t bh = std::ptrdiff_t(batch) * hidden;
    for (int t = steps - 1; t >= 0; --t) {
        T* __restrict__ d = d_pre + t * bh;
        const T* __restrict__ o = out + t * bh;
        for (std::ptrdiff_t i = 0; i < bh; ++i) d[i] *= T(1) - o[i] * o[i];
        if (t)
            times(batch, hidden, hidden, d, w_hh, d_pre + (t - 1) * bh, T(1));
        else
            times(batch, hidden, hidden, d, w_hh, carry, T(0));
    }
}

template <typename T>
void exp_table(std::ptrdiff_t count, const T* x, T* y, int which) {
    for (std::ptrdiff_t i = 0; i < count; ++i)
        y[i] = which == 0 ? exp_of(x[i]) : which == 1 ? tanh_of(x[i]) : sigmoid(x[i]);
}

}  // namespace

extern "C" {

void sweeper_set_gemm(void* s, void* d) {
    sgemm = reinterpret_cast<sgemm_fn>(s);
    dgemm = reinterpret_cast<dgemm_fn>(d);
}

void sweeper_gru_forward_f32(int steps, int batch, int hidden, float* gates, const float* h0,
                             const float* w_hh, const float* b_hn, float* products, float* out,
                             float* rec) {
    gru_forward(steps, batch, hidden, gates, h0, w_hh, b_hn, products, out, rec);
}

void sweeper_gru_forward_f64(int steps, int batch, int hidden, double* gates, const double* h0,
                             const double* w_hh, const double* b_hn, double* products,
                             double* out, double* rec) {
    gru_forward(steps, batch, hidden, gates, h0, w_hh, b_hn, products, out, rec);
}

void sweeper_gru_backward_f32(int steps, int batch, int hidden, const float* gates,
                              const float* products, const float* h0, const float* out,
                              const float* w_hh, float* d_h, float* d_rec, float* carry) {
    gru_backward(steps, batch, hidden, gates, products, h0, out, w_hh, d_h, d_rec, carry);
}

void sweeper_gru_backward_f64(int steps, int batch, int hidden, const double* gates,
                              const double* products, const double* h0, const double* out,
                              const double* w_hh, double* d_h, double* d_rec, double* carry) {
    gru_backward(steps, batch, hidden, gates, products, h0, out, w_hh, d_h, d_rec, carry);
}

void sweeper_elman_forward_f32(int steps, int batch, int hidden, const float* h0,
                               const float* w_hh, float* out) {
    elman_forward(steps, batch, hidden, h0, w_hh, out);
}

void sweeper_elman_forward_f64(int steps, int batch, int hidden, const double* h0,
                               const double* w_hh, double* out) {
    elman_forward(steps, batch, hidden, h0, w_hh, out);
}

void sweeper_elman_backward_f32(int steps, int batch, int hidden, const float* out,
                                const float* w_hh, float* d_pre, float* carry) {
    elman_backward(steps, batch, hidden, out, w_hh, d_pre, carry);
}

void sweeper_elman_backward_f64(int steps, int batch, int hidden, const double* out,
                                const double* w_hh, double* d_pre, double* carry) {
    elman_backward(steps, batch, hidden, out, w_hh, d_pre, carry);
}

// the float32 nonlinearities alone (0: exp, 1: tanh, 2: sigmoid), for the tests
void sweeper_activation_f32(std::ptrdiff_t count, const float* x, float* y, int which) {
    exp_table(count, x, y, which);
}

}  // extern "C"
