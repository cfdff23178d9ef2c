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

typedef struct {
    const ft_board *bd;
    const double *is, *nvt, *rs, *gp, *vcrit, *cf, *esr, *gl, *gn, *il;
    int has_sink;
    /* work */
    double *base, *env, *D, *b, *rhs, *v, *vnew, *vj, *vjnew, *gc, *a, *f, *gj;
} variant;

static int sizes_env(const ft_board *bd) { return bd->start[bd->n]; }

static int variant_alloc(variant *w, const ft_board *bd) {
    int n = bd->n, k = bd->k, m = bd->m, e = sizes_env(bd);
    size_t total = (size_t)2 * e + 6 * (size_t)n + 4 * (size_t)k + 2 * (size_t)m;
    double *mem = (double *)calloc(total ? total : 1, sizeof(double));
    if (!mem) return -1;
    w->bd = bd;
    w->base = mem; mem += e;
    w->env = mem; mem += e;
    w->D = mem; mem += n;
    w->b = mem; mem += n;
    w->rhs = mem; mem += n;
    w->v = mem; mem += n;
    w->vnew = mem; mem += n;
    w->vj = mem; mem += k;
    w->vjnew = mem; mem += k;
    w->f = mem; mem += k;
    w->gj = mem; mem += k;
    w->gc = mem; mem += m;
    w->a = mem; mem += m;
    (void)mem;
    return 0;
}

static void variant_free(variant *w) { free(w->base); }

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
    w->has_sink = 0;
    for (int i = 0; i < n; i++)
        if (w->il[i] != 0.0) w->has_sink = 1;
}

/* ---- skyline L·D·Lᵀ ----------------------------------------------------------------------- */

/* Entry (i, j), j <= i, of a packed envelope. */
static inline double *at(const ft_board *bd, double *env, int i, int j) {
    return env + bd->start[i] + (j - bd->first[i]);
}

/* Add conductance g between nodes p and q (either may be ground, -1). */
static inline void stamp(const ft_board *bd, double *env, int p, int q, double g) {
    if (p >= 0) *at(bd, env, p, p) += g;
    if (q >= 0) *at(bd, env, q, q) += g;
    if (p >= 0 && q >= 0) {
        if (p > q) *at(bd, env, p, q) -= g;
        else *at(bd, env, q, p) -= g;
    }
}

/* Factor in place; D gets the pivots. Returns 0, or -1 at a pivot that is not positive. */
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
            double l = ri[j] / D[j];
            d -= l * ri[j];
            ri[j] = l;
        }
        if (!(d > 0.0)) return -1;
        D[i] = d;
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
    for (int i = 0; i < n; i++) x[i] /= D[i];
    for (int i = n - 1; i >= 0; i--) {
        int fi = bd->first[i];
        const double *ri = env + bd->start[i] - fi;
        double xi = x[i];
        for (int p = fi; p < i; p++) x[p] -= ri[p] * xi;
    }
}

/* Solve (L·D·Lᵀ) X = B in place for the columns of X (n rows of `cols`, row-major): the same
 * sweeps as solve() with each row operation running along all right-hand sides at once. */
static void solve_many(const ft_board *bd, const double *env, const double *D, double *X, int cols) {
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
        double inv = 1.0 / D[i];
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
static void spread_rows(const variant *w, const double *Y, double *R, int cols) {
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
static void gather_rows(const variant *w, const double *Y, const double *Z, double *Ynew, int cols) {
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
    for (int i = 0; i < bd->k; i++) stamp(bd, w->base, bd->d_a[i], bd->d_c[i], w->gp[i]);
    for (int j = 0; j < bd->m; j++) {
        double gc = 1.0 / (w->esr[j] + h / w->cf[j]);
        w->gc[j] = gc;
        w->a[j] = h * gc / w->cf[j];
        stamp(bd, w->base, bd->c_p[j], bd->c_q[j], gc + w->gl[j]);
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
        if (bd->c_p[j] >= 0) w->b[bd->c_p[j]] += q;
        if (bd->c_q[j] >= 0) w->b[bd->c_q[j]] -= q;
    }
    int it;
    for (it = 1; it <= bd->max_newton; it++) {
        memcpy(w->env, w->base, sizeof(double) * (size_t)e);
        memcpy(w->rhs, w->b, sizeof(double) * (size_t)n);
        for (int i = 0; i < k; i++) {
            double vj = w->vj[i], nvt = w->nvt[i];
            double x = vj / nvt;
            double ex = exp(x < 80.0 ? x : 80.0);
            double f = w->is[i] * (ex - 1.0), gj = w->is[i] * ex / nvt;
            double den = 1.0 + gj * w->rs[i];
            double ieq = (f - gj * vj) / den;
            w->f[i] = f;
            w->gj[i] = gj;
            stamp(bd, w->env, bd->d_a[i], bd->d_c[i], gj / den);
            if (bd->d_a[i] >= 0) w->rhs[bd->d_a[i]] -= ieq;
            if (bd->d_c[i] >= 0) w->rhs[bd->d_c[i]] += ieq;
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
            if (!(fabs(vn - w->v[i]) <= bd->vntol + bd->reltol * fabs(vn))) done = 0;
        }
        for (int i = 0; i < k; i++) {
            int pa = bd->d_a[i], pc = bd->d_c[i];
            double across = (pa >= 0 ? w->vnew[pa] : 0.0) - (pc >= 0 ? w->vnew[pc] : 0.0);
            double rs = w->rs[i], gj = w->gj[i], vj = w->vj[i];
            double raw = (across - rs * w->f[i] + rs * gj * vj) / (1.0 + gj * rs);
            double lim = pnjlim(raw, vj, w->nvt[i], w->vcrit[i]);
            if (!(fabs(lim - vj) <= bd->vntol + bd->reltol * fabs(lim))) done = 0;
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
    const ft_board *bd = w->bd;
    for (int j = 0; j < bd->m; j++) {
        int p = bd->c_p[j], q = bd->c_q[j];
        double across = (p >= 0 ? w->v[p] : 0.0) - (q >= 0 ? w->v[q] : 0.0);
        x_new[j] = x_prev[j] + w->a[j] * (across - x_prev[j]);
    }
}

static void fill_nan(double *p, size_t count) {
    for (size_t i = 0; i < count; i++) p[i] = NAN;
}

/* ---- one period of every variant (solver.run_period) ------------------------------------- */

/* Arrays are row-major: inj, guess_v, V (B, T, n) in original node order; x0 (B, m);
 * v_state (B, n), vj_state (B, k) are the Newton start and are left at the period's end;
 * guess_v, guess_vj may be NULL; X (B, T, m); VJ (B, T, k); M (B, m, m) or NULL gets the
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
            if (guess_v) {
                for (int i = 0; i < n; i++) w.v[i] = guess_v[bt * n + bd->perm[i]];
                memcpy(w.vj, guess_vj + bt * k, sizeof(double) * (size_t)k);
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

/* Columns of the parameter vector θ (q = c + k + 2 + P), after the m columns of x0:
 * c part capacitors (relative value), k diode forward drops (volts), the drive and the supply
 * (relative), and a unit current into each probe node. inj, inj_drive, inj_supply (B, T, n);
 * probe (P) original node columns. Out: phi (B, m, m + q) = ∂x_end/∂(x0, θ); avg (B, P, m + q)
 * = ∂v̄_probe/∂(x0, θ) at fixed x0; v_avg, v_min, v_max (B, P). The Newton iteration of each
 * step starts from the previous step's solution (the first from zero), as the reference does.
 * Returns 0, or -1 when memory ran out; a variant whose matrix lost definiteness gets NaN. */
int ft_response(const ft_board *bd, int T, const double *h, const double *inj,
                const double *inj_drive, const double *inj_supply, const double *x0,
                int c, int P, const int *probe, double *phi, double *avg, double *v_avg,
                double *v_min, double *v_max) {
    int n = bd->n, k = bd->k, m = bd->m;
    int q = c + k + 2 + P, cols = m + q;
    variant w;
    if (variant_alloc(&w, bd) != 0) return -1;
    size_t need = (size_t)m * cols * 2 + (size_t)cols * n + 3 * (size_t)m;
    double *mem = (double *)malloc(sizeof(double) * need);
    int *pos = (int *)malloc(sizeof(int) * (size_t)(n + 1));
    if (!mem || !pos) {
        free(mem);
        free(pos);
        variant_free(&w);
        return -1;
    }
    double *Ph = mem;                   /* (m, cols) */
    double *Pn = Ph + (size_t)m * cols; /* next */
    double *R = Pn + (size_t)m * cols;  /* (n, cols) */
    double *x = R + (size_t)cols * n, *xn = x + m, *across = xn + m;
    for (int i = 0; i < n; i++) pos[bd->perm[i]] = i;
    double period = 0.0;
    for (int t = 0; t < T; t++) period += h[t];
    for (int b = 0; b < bd->B; b++) {
        variant_select(&w, b);
        double hprev = -1.0;
        memset(w.v, 0, sizeof(double) * (size_t)n);
        memset(w.vj, 0, sizeof(double) * (size_t)k);
        memcpy(x, x0 + (size_t)b * m, sizeof(double) * (size_t)m);
        memset(Ph, 0, sizeof(double) * (size_t)m * cols);
        for (int j = 0; j < m; j++) Ph[(size_t)j * cols + j] = 1.0;
        double *A = avg + (size_t)b * P * cols;
        double *va = v_avg + (size_t)b * P, *vmin = v_min + (size_t)b * P;
        double *vmax = v_max + (size_t)b * P;
        memset(A, 0, sizeof(double) * (size_t)P * cols);
        for (int j = 0; j < P; j++) {
            va[j] = 0.0;
            vmin[j] = INFINITY;
            vmax[j] = -INFINITY;
        }
        int bad = 0;
        for (int t = 0; t < T; t++) {
            if (h[t] != hprev) {
                prepare_step(&w, h[t]);
                hprev = h[t];
            }
            size_t bt = (size_t)b * T + t;
            if (newton(&w, inj + bt * n, x) < 0) {
                bad = 1;
                break;
            }
            for (int j = 0; j < m; j++) {
                int p = bd->c_p[j], qn = bd->c_q[j];
                across[j] = (p >= 0 ? w.v[p] : 0.0) - (qn >= 0 ? w.v[qn] : 0.0) - x[j];
            }
            /* J·∂v = Acᵀ·gc·∂x_prev + ∂(right-hand side)/∂θ, every column at once */
            spread_rows(&w, Ph, R, cols);
            for (int j = 0; j < c; j++) { /* capacitor value: ∂gc/∂lnC · across */
                double dgc = w.gc[j] * w.gc[j] * h[t] / w.cf[j] * across[j];
                int col = m + j;
                if (bd->c_p[j] >= 0) R[(size_t)bd->c_p[j] * cols + col] -= dgc;
                if (bd->c_q[j] >= 0) R[(size_t)bd->c_q[j] * cols + col] += dgc;
            }
            for (int i = 0; i < k; i++) { /* diode forward-drop shift */
                double vj = w.vj[i], nvt = w.nvt[i], xx = vj / nvt;
                double ex = exp(xx < 80.0 ? xx : 80.0);
                double f = w.is[i] * (ex - 1.0), gj = w.is[i] * ex / nvt;
                double di = -f / (nvt * (1.0 + gj * w.rs[i]));
                int col = m + c + i;
                if (bd->d_a[i] >= 0) R[(size_t)bd->d_a[i] * cols + col] -= di;
                if (bd->d_c[i] >= 0) R[(size_t)bd->d_c[i] * cols + col] += di;
            }
            for (int i = 0; i < n; i++) {
                R[(size_t)i * cols + m + c + k] += inj_drive[bt * n + bd->perm[i]];
                R[(size_t)i * cols + m + c + k + 1] += inj_supply[bt * n + bd->perm[i]];
            }
            for (int j = 0; j < P; j++) R[(size_t)pos[probe[j]] * cols + m + c + k + 2 + j] += 1.0;
            solve_many(bd, w.env, w.D, R, cols);
            double wt = h[t] / period;
            for (int j = 0; j < P; j++) {
                const double *z = R + (size_t)pos[probe[j]] * cols;
                double *aj = A + (size_t)j * cols;
                for (int col = 0; col < cols; col++) aj[col] += wt * z[col];
            }
            gather_rows(&w, Ph, R, Pn, cols);
            for (int j = 0; j < c; j++) { /* ∂a/∂lnC · across */
                double a = w.a[j];
                Pn[(size_t)j * cols + m + j] += a * (a - 1.0) * across[j];
            }
            double *swap = Ph;
            Ph = Pn;
            Pn = swap;
            for (int j = 0; j < P; j++) {
                double vp = w.v[pos[probe[j]]];
                va[j] += wt * vp;
                if (vp < vmin[j]) vmin[j] = vp;
                if (vp > vmax[j]) vmax[j] = vp;
            }
            advance(&w, x, xn);
            memcpy(x, xn, sizeof(double) * (size_t)m);
        }
        double *out = phi + (size_t)b * m * cols;
        if (bad) {
            fill_nan(out, (size_t)m * cols);
            fill_nan(A, (size_t)P * cols);
            fill_nan(va, (size_t)P);
        } else {
            memcpy(out, Ph, sizeof(double) * (size_t)m * cols);
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
