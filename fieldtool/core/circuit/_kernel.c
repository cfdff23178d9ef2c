/* The solver's inner loop, compiled: backward-Euler periods of a batch of circuit variants.
 *
 * Same discretisation, Newton iteration and tolerances as the reference implementation in
 * solver.py (Network, newton, step): backward Euler, Shockley diodes with the series
 * resistance condensed into the branch, SPICE junction limiting (pnjlim), GMIN, and the
 * current-sink load. What differs is only how the linear systems are solved. The nodal
 * matrix is symmetric positive definite (conductances and GMIN to ground), so it is factored
 * as L·D·Lᵀ without pivoting, which is backward stable for such matrices (Golub & Van Loan,
 * *Matrix Computations*, 4th ed., §4.1-4.2), in skyline (envelope) storage: with the nodes
 * ordered so that each touches its neighbours in the ladder and the few source nodes come
 * last, every row holds only a few entries and the cost per factorisation is linear in the
 * number of stages (George & Liu, *Computer Solution of Large Sparse Positive Definite
 * Systems*, 1981, ch. 4).
 *
 * Called through ctypes (fieldtool/core/circuit/kernel.py); the module init at the end only
 * makes the file an importable extension module, so that the ordinary build tools compile it
 * (hatch_build.py). After an edit, `pip install -e .` compiles it again; until then the stale
 * build is not used (its source hash no longer matches).
 */

#define PY_SSIZE_T_CLEAN
#include <Python.h>

#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#define FT_ABI 1
#ifndef FT_SOURCE_HASH /* set by the build (hatch_build.py) to a hash of this file */
#define FT_SOURCE_HASH ""
#endif

typedef struct {
    int n, k, m, B;
    /* topology, node numbers in elimination order (-1 is ground) */
    const int *perm;     /* (n) elimination position -> original node column */
    const int *d_a;      /* (k) diode anode */
    const int *d_c;      /* (k) diode cathode */
    const int *c_p;      /* (m) capacitor positive terminal */
    const int *c_q;      /* (m) capacitor negative terminal */
    const int *first;    /* (n) first column of each row's envelope */
    const int *start;    /* (n+1) offset of each row in the packed envelope */
    double vntol, reltol;
    int max_newton;
    /* element values of every variant, row-major; node arrays in original node order */
    const double *d_is, *d_nvt, *d_rs, *d_gp, *d_vcrit; /* (B, k) */
    const double *c_f, *c_esr, *c_gl;                    /* (B, m) */
    const double *g_node;                                /* (B, n) GMIN + shunt + sources */
    const double *i_load;                                /* (B, n) */
} ft_board;

int ft_abi(void) { return FT_ABI; }
const char *ft_source_hash(void) { return FT_SOURCE_HASH; }

/* ---- one variant's view of the board ---------------------------------------------------- */

/* Node n is a ground slot: element ends at ground point at it, so the inner loops need no
 * branches (it always reads 0 V; what is added to it is thrown away). Likewise env[e], one past
 * the envelope, takes the stamps that fall on ground. */
typedef struct {
    const ft_board *bd;
    const double *is, *nvt, *rs, *gp, *vcrit, *cf, *esr, *gl, *gn, *il;
    int has_sink;
    /* work */
    double *base, *env, *D, *b, *rhs, *v, *vnew, *vj, *vjnew, *gc, *a, *f, *gj, *inv_nvt, *is_nvt;
    int *d_off, *c_off; /* (k, 3), (m, 3): where each element stamps in the envelope */
    int *da, *dc, *cp, *cq; /* element terminals with ground mapped to node n */
} variant;

static int sizes_env(const ft_board *bd) { return bd->start[bd->n]; }

/* Offset of entry (i, j), j <= i, in the packed envelope. */
static inline int offset(const ft_board *bd, int i, int j) { return bd->start[i] + (j - bd->first[i]); }

/* Where a two-terminal element between p and q (-1 for ground) stamps: diagonal p, diagonal q,
 * the off-diagonal entry; the spare slot e where there is none. */
static void offsets(const ft_board *bd, int p, int q, int *off) {
    int e = sizes_env(bd);
    off[0] = p >= 0 ? offset(bd, p, p) : e;
    off[1] = q >= 0 ? offset(bd, q, q) : e;
    off[2] = e;
    if (p >= 0 && q >= 0 && p != q) off[2] = p > q ? offset(bd, p, q) : offset(bd, q, p);
}

/* Add conductance g across an element whose stamp offsets are `off`. */
static inline void stamp_at(double *env, const int *off, double g) {
    env[off[0]] += g;
    env[off[1]] += g;
    env[off[2]] -= g;
}

static int variant_alloc(variant *w, const ft_board *bd) {
    int n = bd->n, k = bd->k, m = bd->m, e = sizes_env(bd);
    size_t total = (size_t)2 * (e + 1) + 6 * (size_t)(n + 1) + 6 * (size_t)k + 2 * (size_t)m;
    double *mem = (double *)calloc(total, sizeof(double));
    int *idx = (int *)malloc(sizeof(int) * (size_t)(5 * k + 5 * m + 1));
    if (!mem || !idx) {
        free(mem);
        free(idx);
        return -1;
    }
    w->bd = bd;
    w->base = mem; mem += e + 1;
    w->env = mem; mem += e + 1;
    w->D = mem; mem += n + 1;
    w->b = mem; mem += n + 1;
    w->rhs = mem; mem += n + 1;
    w->v = mem; mem += n + 1;
    w->vnew = mem; mem += n + 1;
    mem += n + 1; /* spare */
    w->vj = mem; mem += k;
    w->vjnew = mem; mem += k;
    w->f = mem; mem += k;
    w->gj = mem; mem += k;
    w->inv_nvt = mem; mem += k;
    w->is_nvt = mem; mem += k;
    w->gc = mem; mem += m;
    w->a = mem; mem += m;
    w->d_off = idx; idx += 3 * k;
    w->c_off = idx; idx += 3 * m;
    w->da = idx; idx += k;
    w->dc = idx; idx += k;
    w->cp = idx; idx += m;
    w->cq = idx;
    for (int i = 0; i < k; i++) {
        offsets(bd, bd->d_a[i], bd->d_c[i], w->d_off + 3 * i);
        w->da[i] = bd->d_a[i] >= 0 ? bd->d_a[i] : n;
        w->dc[i] = bd->d_c[i] >= 0 ? bd->d_c[i] : n;
    }
    for (int j = 0; j < m; j++) {
        offsets(bd, bd->c_p[j], bd->c_q[j], w->c_off + 3 * j);
        w->cp[j] = bd->c_p[j] >= 0 ? bd->c_p[j] : n;
        w->cq[j] = bd->c_q[j] >= 0 ? bd->c_q[j] : n;
    }
    return 0;
}

static void variant_free(variant *w) {
    free(w->base);
    free(w->d_off);
}

static void variant_select(variant *w, int row) {
    const ft_board *bd = w->bd;
    int k = bd->k, m = bd->m, n = bd->n;
    w->is = bd->d_is + (size_t)row * k;
    w->nvt = bd->d_nvt + (size_t)row * k;
    w->rs = bd->d_rs + (size_t)row * k;
    w->gp = bd->d_gp + (size_t)row * k;
    w->vcrit = bd->d_vcrit + (size_t)row * k;
    w->cf = bd->c_f + (size_t)row * m;
    w->esr = bd->c_esr + (size_t)row * m;
    w->gl = bd->c_gl + (size_t)row * m;
    w->gn = bd->g_node + (size_t)row * n;
    w->il = bd->i_load + (size_t)row * n;
    for (int i = 0; i < k; i++) {
        w->inv_nvt[i] = 1.0 / w->nvt[i];
        w->is_nvt[i] = w->is[i] / w->nvt[i];
    }
    w->has_sink = 0;
    for (int i = 0; i < n; i++)
        if (w->il[i] != 0.0) w->has_sink = 1;
    w->v[n] = w->vnew[n] = 0.0;
}

/* The sensitivity sweeps run along rows of many right-hand sides; on GCC for x86-64 Linux they
 * are also compiled for AVX2 and the loader picks the clone the CPU runs (target_clones). No
 * FMA is enabled and no reduction is reordered, so either clone gives the same bits. */
#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__)
#define FT_WIDE __attribute__((target_clones("avx2", "default")))
#else
#define FT_WIDE
#endif

/* ---- skyline L·D·Lᵀ ----------------------------------------------------------------------- */

/* Entry (i, j), j <= i, of a packed envelope. */
static inline double *at(const ft_board *bd, double *env, int i, int j) {
    return env + bd->start[i] + (j - bd->first[i]);
}

/* Factor in place; D gets the inverse pivots. Returns 0, or -1 at a pivot that is not
 * positive. */
static int factor(const ft_board *bd, double *env, double *D) {
    int n = bd->n;
    for (int i = 0; i < n; i++) {
        int fi = bd->first[i];
        double *ri = env + bd->start[i] - fi; /* ri[j] = entry (i, j) */
        for (int j = fi; j < i; j++) {
            int fj = bd->first[j];
            const double *rj = env + bd->start[j] - fj;
            int lo = fi > fj ? fi : fj;
            double s = ri[j];
            for (int p = lo; p < j; p++) s -= ri[p] * rj[p];
            ri[j] = s; /* L(i,j)·D(j), scaled below */
        }
        double d = ri[i];
        for (int j = fi; j < i; j++) {
            double l = ri[j] * D[j];
            d -= l * ri[j];
            ri[j] = l;
        }
        if (!(d > 0.0)) return -1;
        D[i] = 1.0 / d;
        ri[i] = d;
    }
    return 0;
}

/* Solve (L·D·Lᵀ) x = b in place. */
static void solve(const ft_board *bd, const double *env, const double *D, double *x) {
    int n = bd->n;
    for (int i = 0; i < n; i++) {
        int fi = bd->first[i];
        const double *ri = env + bd->start[i] - fi;
        double s = x[i];
        for (int p = fi; p < i; p++) s -= ri[p] * x[p];
        x[i] = s;
    }
    for (int i = 0; i < n; i++) x[i] *= D[i];
    for (int i = n - 1; i >= 0; i--) {
        int fi = bd->first[i];
        const double *ri = env + bd->start[i] - fi;
        double xi = x[i];
        for (int p = fi; p < i; p++) x[p] -= ri[p] * xi;
    }
}

/* Solve (L·D·Lᵀ) X = B in place for the columns of X (n rows of `cols`, row-major): the same
 * sweeps as solve() with each row operation running along all right-hand sides at once. */
FT_WIDE static void solve_many(const ft_board *bd, const double *env, const double *D, double *X, int cols) {
    int n = bd->n;
    for (int i = 0; i < n; i++) {
        int fi = bd->first[i];
        const double *ri = env + bd->start[i] - fi;
        double *xi = X + (size_t)i * cols;
        for (int p = fi; p < i; p++) {
            double l = ri[p];
            const double *xp = X + (size_t)p * cols;
            for (int c = 0; c < cols; c++) xi[c] -= l * xp[c];
        }
    }
    for (int i = 0; i < n; i++) {
        double inv = D[i];
        double *xi = X + (size_t)i * cols;
        for (int c = 0; c < cols; c++) xi[c] *= inv;
    }
    for (int i = n - 1; i >= 0; i--) {
        int fi = bd->first[i];
        const double *ri = env + bd->start[i] - fi;
        const double *xi = X + (size_t)i * cols;
        for (int p = fi; p < i; p++) {
            double l = ri[p];
            double *xp = X + (size_t)p * cols;
            for (int c = 0; c < cols; c++) xp[c] -= l * xi[c];
        }
    }
}

/* R = Acᵀ·diag(gc)·Y for Y (m rows of `cols`), R (n rows of `cols`), both row-major. */
FT_WIDE static void spread_rows(const variant *w, const double *Y, double *R, int cols) {
    const ft_board *bd = w->bd;
    memset(R, 0, sizeof(double) * (size_t)bd->n * cols);
    for (int j = 0; j < bd->m; j++) {
        double g = w->gc[j];
        const double *y = Y + (size_t)j * cols;
        int p = bd->c_p[j], q = bd->c_q[j];
        if (p >= 0) {
            double *r = R + (size_t)p * cols;
            for (int c = 0; c < cols; c++) r[c] += g * y[c];
        }
        if (q >= 0) {
            double *r = R + (size_t)q * cols;
            for (int c = 0; c < cols; c++) r[c] -= g * y[c];
        }
    }
}

/* Ynew = diag(1 - a)·Y + diag(a)·Ac·Z, rows of `cols` (the capacitor update's derivative). */
FT_WIDE static void gather_rows(const variant *w, const double *Y, const double *Z, double *Ynew, int cols) {
    const ft_board *bd = w->bd;
    for (int j = 0; j < bd->m; j++) {
        int p = bd->c_p[j], q = bd->c_q[j];
        double a = w->a[j], keep = 1.0 - a;
        const double *y = Y + (size_t)j * cols;
        const double *zp = p >= 0 ? Z + (size_t)p * cols : NULL;
        const double *zq = q >= 0 ? Z + (size_t)q * cols : NULL;
        double *out = Ynew + (size_t)j * cols;
        for (int c = 0; c < cols; c++) {
            double dz = (zp ? zp[c] : 0.0) - (zq ? zq[c] : 0.0);
            out[c] = keep * y[c] + a * dz;
        }
    }
}

/* ---- devices ------------------------------------------------------------------------------ */

#define SINK_KNEE 0.5 /* V, as solver.SINK_KNEE_VOLTS */

/* exp(min(x, 80)) as the reference takes it; below -50 (a junction reverse biased by more than
 * 50 nVt) it is below 2e-22 and is taken as 0: the diode's current is then -Is to within
 * 2e-22 relative and its conductance far below GMIN, so nothing a result shows changes. */
static inline double junction_exp(double x) {
    if (x < -50.0) return 0.0;
    return exp(x < 80.0 ? x : 80.0);
}

static inline void sink(double amps, double v, double *i, double *g) {
    double mag = fabs(amps), sign = amps < 0 ? -1.0 : 1.0, u = v * sign;
    double ex = exp(-(u > 0 ? u : 0.0) / SINK_KNEE);
    double phi = u > 0 ? 1.0 - ex : u / SINK_KNEE;
    double dphi = (u > 0 ? ex : 1.0) / SINK_KNEE;
    *i = sign * mag * phi;
    *g = mag * dphi;
}

static inline double pnjlim(double vnew, double vold, double nvt, double vcrit) {
    if (!(vnew > vcrit && fabs(vnew - vold) > 2 * nvt)) return vnew;
    if (vold > 0) {
        double arg = 1.0 + (vnew - vold) / nvt;
        return arg > 0 ? vold + nvt * log(arg > 1e-300 ? arg : 1e-300) : vcrit;
    }
    double r = vnew / nvt;
    return nvt * log(r > 1e-300 ? r : 1e-300);
}

/* Capacitor companions for step h, and the base matrix without diodes. */
static void prepare_step(variant *w, double h) {
    const ft_board *bd = w->bd;
    int e = sizes_env(bd);
    memset(w->base, 0, sizeof(double) * (size_t)e);
    for (int i = 0; i < bd->n; i++) *at(bd, w->base, i, i) += w->gn[bd->perm[i]];
    for (int i = 0; i < bd->k; i++) stamp_at(w->base, w->d_off + 3 * i, w->gp[i]);
    for (int j = 0; j < bd->m; j++) {
        double gc = 1.0 / (w->esr[j] + h / w->cf[j]);
        w->gc[j] = gc;
        w->a[j] = h * gc / w->cf[j];
        stamp_at(w->base, w->c_off + 3 * j, gc + w->gl[j]);
    }
}

/* One backward-Euler step's Newton iteration (solver.newton). On entry w->v, w->vj hold the
 * start; on exit they hold the solution and w->env, w->D the factored Jacobian of the last
 * update. b_src: injections in original node order. Returns the iteration count, or -1 when a
 * pivot was not positive. */
static int newton(variant *w, const double *b_src, const double *x_prev) {
    const ft_board *bd = w->bd;
    int n = bd->n, k = bd->k, e = sizes_env(bd);
    for (int i = 0; i < n; i++) w->b[i] = b_src[bd->perm[i]];
    for (int j = 0; j < bd->m; j++) {
        double q = w->gc[j] * x_prev[j];
        w->b[w->cp[j]] += q;
        w->b[w->cq[j]] -= q;
    }
    int it;
    for (it = 1; it <= bd->max_newton; it++) {
        memcpy(w->env, w->base, sizeof(double) * (size_t)e);
        memcpy(w->rhs, w->b, sizeof(double) * (size_t)n);
        for (int i = 0; i < k; i++) {
            double vj = w->vj[i];
            double ex = junction_exp(vj * w->inv_nvt[i]);
            double f = w->is[i] * (ex - 1.0), gj = w->is_nvt[i] * ex;
            double inv_den = 1.0 / (1.0 + gj * w->rs[i]);
            double ieq = (f - gj * vj) * inv_den;
            w->f[i] = f;
            w->gj[i] = gj;
            stamp_at(w->env, w->d_off + 3 * i, gj * inv_den);
            w->rhs[w->da[i]] -= ieq;
            w->rhs[w->dc[i]] += ieq;
        }
        if (w->has_sink) {
            for (int i = 0; i < n; i++) {
                double amps = w->il[bd->perm[i]];
                if (amps == 0.0) continue;
                double is, gs;
                sink(amps, w->v[i], &is, &gs);
                *at(bd, w->env, i, i) += gs;
                w->rhs[i] -= is - gs * w->v[i];
            }
        }
        if (factor(bd, w->env, w->D) != 0) return -1;
        memcpy(w->vnew, w->rhs, sizeof(double) * (size_t)n);
        solve(bd, w->env, w->D, w->vnew);
        int done = 1;
        for (int i = 0; i < n; i++) {
            double vn = w->vnew[i];
            done &= fabs(vn - w->v[i]) <= bd->vntol + bd->reltol * fabs(vn);
        }
        for (int i = 0; i < k; i++) {
            double across = w->vnew[w->da[i]] - w->vnew[w->dc[i]];
            double rs = w->rs[i], gj = w->gj[i], vj = w->vj[i];
            double raw = (across - rs * w->f[i] + rs * gj * vj) / (1.0 + gj * rs);
            double lim = pnjlim(raw, vj, w->nvt[i], w->vcrit[i]);
            done &= fabs(lim - vj) <= bd->vntol + bd->reltol * fabs(lim);
            w->vjnew[i] = lim;
        }
        memcpy(w->v, w->vnew, sizeof(double) * (size_t)n);
        memcpy(w->vj, w->vjnew, sizeof(double) * (size_t)k);
        if (done) break;
    }
    return it > bd->max_newton ? bd->max_newton : it;
}

/* x_new = x_prev + a (Ac v - x_prev) */
static void advance(const variant *w, const double *x_prev, double *x_new) {
    for (int j = 0; j < w->bd->m; j++) {
        double across = w->v[w->cp[j]] - w->v[w->cq[j]];
        x_new[j] = x_prev[j] + w->a[j] * (across - x_prev[j]);
    }
}

/* True when the step just solved stayed within one n·Vt of the earlier period at every
 * junction: the next step's Newton iteration then starts from this step's solution plus the
 * earlier period's change over the next step; otherwise from this step's solution alone
 * (solver.run_period does the same). */
static int near_guess(const variant *w, const double *guess_vj) {
    for (int i = 0; i < w->bd->k; i++)
        if (!(fabs(w->vj[i] - guess_vj[i]) <= w->nvt[i])) return 0;
    return 1;
}

static void fill_nan(double *p, size_t count) {
    for (size_t i = 0; i < count; i++) p[i] = NAN;
}

/* ---- one period of every variant (solver.run_period) ------------------------------------- */

/* Arrays are row-major: inj, guess_v, V (B, T, n) in original node order; x0 (B, m);
 * v_state (B, n), vj_state (B, k) are the Newton start and are left at the period's end;
 * guess_v, guess_vj may be NULL (each step's Newton start, see near_guess); X (B, T, m); VJ (B, T, k); M (B, m, m) or NULL gets the
 * monodromy, the product of the steps' ∂x_t/∂x_(t-1); newton (B) gets each variant's Newton
 * iteration total. Returns 0, or -1 when memory ran out. A variant whose matrix lost
 * definiteness gets NaN (the shooting then reports it as not converged). */
int ft_period(const ft_board *bd, int T, const double *h, const double *inj, const double *x0,
              double *v_state, double *vj_state, const double *guess_v, const double *guess_vj,
              double *V, double *X, double *VJ, double *M, int64_t *newton_total) {
    int n = bd->n, k = bd->k, m = bd->m;
    variant w;
    if (variant_alloc(&w, bd) != 0) return -1;
    double *mem = (double *)malloc(sizeof(double) * (size_t)(2 * m + 2 * m * m + n * m + 1));
    if (!mem) {
        variant_free(&w);
        return -1;
    }
    double *x = mem, *xn = x + m, *Mc = xn + m, *Mn = Mc + (size_t)m * m, *R = Mn + (size_t)m * m;
    for (int b = 0; b < bd->B; b++) {
        variant_select(&w, b);
        double hprev = -1.0;
        for (int i = 0; i < n; i++) w.v[i] = v_state[(size_t)b * n + bd->perm[i]];
        memcpy(w.vj, vj_state + (size_t)b * k, sizeof(double) * (size_t)k);
        memcpy(x, x0 + (size_t)b * m, sizeof(double) * (size_t)m);
        if (M) {
            memset(Mc, 0, sizeof(double) * (size_t)m * m);
            for (int j = 0; j < m; j++) Mc[(size_t)j * m + j] = 1.0;
        }
        int64_t total = 0;
        int bad = 0;
        for (int t = 0; t < T; t++) {
            if (h[t] != hprev) {
                prepare_step(&w, h[t]);
                hprev = h[t];
            }
            size_t bt = (size_t)b * T + t;
            if (guess_v && t == 0) {
                for (int i = 0; i < n; i++) w.v[i] = guess_v[bt * n + bd->perm[i]];
                memcpy(w.vj, guess_vj + bt * k, sizeof(double) * (size_t)k);
            } else if (guess_v && near_guess(&w, guess_vj + (bt - 1) * k)) {
                const double *gv = guess_v + bt * n, *gj = guess_vj + bt * k;
                for (int i = 0; i < n; i++) w.v[i] += gv[bd->perm[i]] - gv[bd->perm[i] - n];
                for (int i = 0; i < k; i++) w.vj[i] += gj[i] - gj[i - k];
            }
            int it = newton(&w, inj + bt * n, x);
            if (it < 0) {
                bad = 1;
                break;
            }
            total += it;
            advance(&w, x, xn);
            if (M) {
                spread_rows(&w, Mc, R, m);
                solve_many(bd, w.env, w.D, R, m);
                gather_rows(&w, Mc, R, Mn, m);
                double *swap = Mc;
                Mc = Mn;
                Mn = swap;
            }
            memcpy(x, xn, sizeof(double) * (size_t)m);
            for (int i = 0; i < n; i++) V[bt * n + bd->perm[i]] = w.v[i];
            memcpy(X + bt * m, x, sizeof(double) * (size_t)m);
            memcpy(VJ + bt * k, w.vj, sizeof(double) * (size_t)k);
        }
        if (bad) {
            fill_nan(V + (size_t)b * T * n, (size_t)T * n);
            fill_nan(X + (size_t)b * T * m, (size_t)T * m);
            fill_nan(VJ + (size_t)b * T * k, (size_t)T * k);
            fill_nan(w.v, (size_t)n);
            fill_nan(w.vj, (size_t)k);
            fill_nan(Mc, (size_t)m * m);
        }
        for (int i = 0; i < n; i++) v_state[(size_t)b * n + bd->perm[i]] = w.v[i];
        memcpy(vj_state + (size_t)b * k, w.vj, sizeof(double) * (size_t)k);
        if (M) memcpy(M + (size_t)b * m * m, Mc, sizeof(double) * (size_t)m * m);
        newton_total[b] = total;
    }
    free(mem);
    variant_free(&w);
    return 0;
}

/* ---- one period of variational equations (response.linear_response) -------------------- */

/* The same derivatives as the reference's forward variational equations, taken in reverse
 * (adjoint) mode: one backward sweep over the stored steps carries P + m row vectors (the P
 * probe averages and the m end-of-period capacitor voltages) instead of carrying m + q columns
 * forward, q = c + k + 2 + P parameters (Griewank & Walther, *Evaluating Derivatives*, 2nd ed.,
 * SIAM 2008, ch. 3). The nodal matrix is symmetric, so each step's stored factor serves its
 * transposed solve.
 *
 * Parameters θ, after the m columns of x0: c part capacitors (relative value), k diode forward
 * drops (volts), the drive and the supply (relative), and a unit current into each probe node.
 * inj, inj_drive, inj_supply (B, T, n); probe (P) original node columns. Out: phi (B, m, m + q)
 * = ∂x_end/∂(x0, θ); avg (B, P, m + q) = ∂v̄_probe/∂(x0, θ) at fixed x0; v_avg, v_min, v_max
 * (B, P). Each step's Newton iteration starts from the previous step's solution (the first from
 * zero), as the reference does. Returns 0, or -1 when memory ran out; a variant whose matrix
 * lost definiteness gets NaN. */
int ft_response(const ft_board *bd, int T, const double *h, const double *inj,
                const double *inj_drive, const double *inj_supply, const double *x0,
                int c, int P, const int *probe, double *phi, double *avg, double *v_avg,
                double *v_min, double *v_max) {
    int n = bd->n, k = bd->k, m = bd->m, e = sizes_env(bd);
    int q = c + k + 2 + P, cols = m + q, R = P + m;
    int per_step = (e + 1) + (n + 1) + 3 * m + k; /* factor, pivots, gc, a, across, di */
    variant w;
    if (variant_alloc(&w, bd) != 0) return -1;
    size_t need = (size_t)T * per_step + (size_t)m * R + (size_t)(n + 1) * R + (size_t)q * R + 2 * (size_t)m;
    double *mem = (double *)malloc(sizeof(double) * need);
    int *pos = (int *)malloc(sizeof(int) * (size_t)(n + 1));
    if (!mem || !pos) {
        free(mem);
        free(pos);
        variant_free(&w);
        return -1;
    }
    double *steps = mem;                          /* (T, per_step) */
    double *Xi = steps + (size_t)T * per_step;    /* (m, R): adjoint of x_t */
    double *Vb = Xi + (size_t)m * R;              /* (n + 1, R): adjoint of v_t, then μ_t */
    double *Th = Vb + (size_t)(n + 1) * R;        /* (q, R): adjoint of θ */
    double *x = Th + (size_t)q * R, *xn = x + m;
    for (int i = 0; i < n; i++) pos[bd->perm[i]] = i;
    double period = 0.0;
    for (int t = 0; t < T; t++) period += h[t];
    for (int b = 0; b < bd->B; b++) {
        variant_select(&w, b);
        double *va = v_avg + (size_t)b * P, *vmin = v_min + (size_t)b * P;
        double *vmax = v_max + (size_t)b * P;
        double *A = avg + (size_t)b * P * cols, *out = phi + (size_t)b * m * cols;
        /* forward: the period, keeping each step's factor and element derivatives */
        double hprev = -1.0;
        memset(w.v, 0, sizeof(double) * (size_t)n);
        memset(w.vj, 0, sizeof(double) * (size_t)k);
        memcpy(x, x0 + (size_t)b * m, sizeof(double) * (size_t)m);
        for (int j = 0; j < P; j++) {
            va[j] = 0.0;
            vmin[j] = INFINITY;
            vmax[j] = -INFINITY;
        }
        int bad = 0;
        for (int t = 0; t < T && !bad; t++) {
            if (h[t] != hprev) {
                prepare_step(&w, h[t]);
                hprev = h[t];
            }
            if (newton(&w, inj + ((size_t)b * T + t) * n, x) < 0) {
                bad = 1;
                break;
            }
            double *st = steps + (size_t)t * per_step;
            double *s_env = st, *s_D = st + e + 1, *s_gc = s_D + n + 1, *s_a = s_gc + m;
            double *s_across = s_a + m, *s_di = s_across + m;
            memcpy(s_env, w.env, sizeof(double) * (size_t)(e + 1));
            memcpy(s_D, w.D, sizeof(double) * (size_t)(n + 1));
            memcpy(s_gc, w.gc, sizeof(double) * (size_t)m);
            memcpy(s_a, w.a, sizeof(double) * (size_t)m);
            for (int j = 0; j < m; j++) s_across[j] = w.v[w.cp[j]] - w.v[w.cq[j]] - x[j];
            for (int i = 0; i < k; i++) { /* ∂(branch current)/∂(forward-drop shift) */
                double ex = junction_exp(w.vj[i] * w.inv_nvt[i]);
                double f = w.is[i] * (ex - 1.0), gj = w.is_nvt[i] * ex;
                s_di[i] = -f * w.inv_nvt[i] / (1.0 + gj * w.rs[i]);
            }
            double wt = h[t] / period;
            for (int j = 0; j < P; j++) {
                double vp = w.v[pos[probe[j]]];
                va[j] += wt * vp;
                if (vp < vmin[j]) vmin[j] = vp;
                if (vp > vmax[j]) vmax[j] = vp;
            }
            advance(&w, x, xn);
            memcpy(x, xn, sizeof(double) * (size_t)m);
        }
        if (bad) {
            fill_nan(out, (size_t)m * cols);
            fill_nan(A, (size_t)P * cols);
            fill_nan(va, (size_t)P);
            continue;
        }
        /* backward: rows 0..P-1 the probe averages, rows P..P+m-1 the end-of-period x */
        memset(Xi, 0, sizeof(double) * (size_t)m * R);
        for (int j = 0; j < m; j++) Xi[(size_t)j * R + P + j] = 1.0;
        memset(Th, 0, sizeof(double) * (size_t)q * R);
        for (int t = T - 1; t >= 0; t--) {
            const double *st = steps + (size_t)t * per_step;
            const double *s_env = st, *s_D = st + e + 1, *s_gc = s_D + n + 1, *s_a = s_gc + m;
            const double *s_across = s_a + m, *s_di = s_across + m;
            size_t bt = (size_t)b * T + t;
            /* v̄_t = ȳ_t + (ξ_t ⊙ a)·Ac */
            memset(Vb, 0, sizeof(double) * (size_t)(n + 1) * R);
            double wt = h[t] / period;
            for (int j = 0; j < P; j++) Vb[(size_t)pos[probe[j]] * R + j] += wt;
            for (int j = 0; j < m; j++) {
                const double *xi = Xi + (size_t)j * R;
                double *vp = Vb + (size_t)w.cp[j] * R, *vq = Vb + (size_t)w.cq[j] * R;
                double aj = s_a[j];
                for (int r = 0; r < R; r++) {
                    vp[r] += aj * xi[r];
                    vq[r] -= aj * xi[r];
                }
            }
            solve_many(bd, s_env, s_D, Vb, R); /* μ_t = v̄_t·J_t⁻¹ */
            memset(Vb + (size_t)n * R, 0, sizeof(double) * (size_t)R); /* μ at ground is 0 */
            /* θ̄ += μ_t·∂r_t/∂θ + ξ_t·∂x_t/∂θ, then ξ_(t-1) = ξ_t⊙(1 - a) + μ_t·Acᵀ·diag(gc) */
            for (int j = 0; j < m; j++) {
                const double *mp = Vb + (size_t)w.cp[j] * R, *mq = Vb + (size_t)w.cq[j] * R;
                double *xi = Xi + (size_t)j * R;
                double aj = s_a[j], gcj = s_gc[j], keep = 1.0 - aj;
                if (j < c) {
                    double *th = Th + (size_t)j * R;
                    double dgc = gcj * gcj * h[t] / w.cf[j] * s_across[j];
                    double da = aj * (aj - 1.0) * s_across[j];
                    for (int r = 0; r < R; r++) th[r] += (mq[r] - mp[r]) * dgc + xi[r] * da;
                }
                for (int r = 0; r < R; r++) xi[r] = xi[r] * keep + gcj * (mp[r] - mq[r]);
            }
            for (int i = 0; i < k; i++) {
                const double *ma = Vb + (size_t)w.da[i] * R, *mc = Vb + (size_t)w.dc[i] * R;
                double *th = Th + (size_t)(c + i) * R;
                double di = s_di[i];
                for (int r = 0; r < R; r++) th[r] += (mc[r] - ma[r]) * di;
            }
            double *th_drive = Th + (size_t)(c + k) * R, *th_supply = th_drive + R;
            for (int i = 0; i < n; i++) {
                double gd = inj_drive[bt * n + bd->perm[i]], gs = inj_supply[bt * n + bd->perm[i]];
                if (gd == 0.0 && gs == 0.0) continue;
                const double *mi = Vb + (size_t)i * R;
                for (int r = 0; r < R; r++) {
                    th_drive[r] += mi[r] * gd;
                    th_supply[r] += mi[r] * gs;
                }
            }
            for (int j = 0; j < P; j++) {
                const double *mi = Vb + (size_t)pos[probe[j]] * R;
                double *th = Th + (size_t)(c + k + 2 + j) * R;
                for (int r = 0; r < R; r++) th[r] += mi[r];
            }
        }
        for (int row = 0; row < R; row++) {
            double *dst = row < P ? A + (size_t)row * cols : out + (size_t)(row - P) * cols;
            for (int col = 0; col < m; col++) dst[col] = Xi[(size_t)col * R + row];
            for (int th = 0; th < q; th++) dst[m + th] = Th[(size_t)th * R + row];
        }
    }
    free(mem);
    free(pos);
    variant_free(&w);
    return 0;
}

/* ---- an importable module, so the ordinary build tools compile this file ---------------- */

static struct PyModuleDef kernel_module = {
    PyModuleDef_HEAD_INIT, "_kernel",
    "The solver's compiled inner loop; loaded through ctypes by fieldtool.core.circuit.kernel.",
    -1, NULL, NULL, NULL, NULL, NULL};

PyMODINIT_FUNC PyInit__kernel(void) { return PyModule_Create(&kernel_module); }
