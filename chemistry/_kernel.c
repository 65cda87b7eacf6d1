/*
 * Compiled array path of chemistry.solver.solve: the same relations and the same safeguarded
 * Newton iteration as the numpy code, fused into one pass per block of readings so that a
 * million readings are solved without a million-element temporary per operation.
 *
 * The numpy code in chemistry/constants.py, chemistry/scales.py and chemistry/solver.py is
 * the reference: every relation here names the Python function it mirrors, and
 * tests/chemistry/test_kernel.py checks every output against it over the whole input domain.
 * A change of a coefficient or a relation is made in both places.
 *
 * Units as in the Python code: concentrations in mol/kg inside, umol/kg and uatm outside;
 * temperature deg C; K1, K2, KB, KW, KF, K1P, K2P, K3P, KSi on the total scale, KS free.
 * Zero gauge pressure only: the Python code handles pressure.
 *
 * On x86-64 with glibc, exp and log are declared with their vector variants (glibc's libmvec),
 * and the function is compiled for AVX-512, AVX2 and the baseline, picked at load time, so
 * the per-block loops run several readings per instruction. No -ffast-math: rounding stays
 * IEEE, NaN and infinities keep their meaning, and the process's floating-point mode is left
 * alone.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <float.h>
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#if defined(__unix__) || defined(__APPLE__)
#include <pthread.h>
#define SPATLINE_THREADS 1
#else
#define SPATLINE_THREADS 0
#endif
#include <string.h>
#if defined(__SSE2__)
#include <emmintrin.h>
#endif

#if defined(__x86_64__) && defined(__GLIBC__) && defined(__GNUC__) && !defined(__clang__)
__attribute__((simd("notinbranch"))) double exp(double);
__attribute__((simd("notinbranch"))) double log(double);
#define SPATLINE_CLONES                                                                            \
    __attribute__((target_clones("arch=x86-64-v4", "arch=x86-64-v3", "default")))
#else
#define SPATLINE_CLONES
#endif

/* Inlined into each compiled copy, where the pair and the nutrients are constants. */
#define INLINE static inline __attribute__((always_inline))

#define BLOCK 128
#define MICRO 1e-6
#define PER_MICRO 1e6
#define LN10 2.302585092994046
#define INV_LN10 0.4342944819032518   /* 1 / ln 10: a product, where a division costs several */
#define ZERO_CELSIUS_K 273.15         /* constants.ZERO_CELSIUS_K */
#define GAS_CONSTANT_CM3_ATM 82.05736 /* constants.GAS_CONSTANT_CM3_ATM */
#define RELATIVE_TOLERANCE 1e-10      /* solver._RELATIVE_TOLERANCE */
#define MAX_ITERATIONS 200            /* solver._MAX_ITERATIONS */
#define DIC_ROUNDING 1e-12            /* solver._DIC_ROUNDING */

/* Pairs of given quantities (chemistry.kernel.PAIRS). */
enum { PH_ALK, PH_DIC, PH_PCO2, ALK_DIC, ALK_PCO2, DIC_PCO2 };
/* pH scales (chemistry.scales.PH_SCALES). */
enum { SCALE_TOTAL, SCALE_SEAWATER, SCALE_FREE, SCALE_NBS };
/* Input columns (chemistry.kernel.solve_flat) and constant shifts (solver.CONSTANT_SHIFT_KEYS). */
enum { IN_T, IN_S, IN_PO4, IN_SI, IN_A, IN_B, N_INPUTS };
enum { SH_K0, SH_K1, SH_K2, SH_KB, SH_KW, SH_KSPA, SH_KSPC, SH_BORON, N_SHIFTS };
/* Outputs, in the order of solver._OUTPUT_NAMES. */
enum {
    OUT_PH_TOTAL,
    OUT_PH_FREE,
    OUT_PH_SEAWATER,
    OUT_PH_NBS,
    OUT_ALK,
    OUT_DIC,
    OUT_CO2,
    OUT_HCO3,
    OUT_CO3,
    OUT_PCO2,
    OUT_FCO2,
    OUT_OMEGA_A,
    OUT_OMEGA_C,
    OUT_REVELLE,
    N_OUTPUTS
};
/* Return codes: inputs no water can have (solver._inconsistent messages). */
enum { OK = 0, NEGATIVE_DIC = 1, CO2_ABOVE_DIC = 2, PH_UNDEFINED = 3, OUT_OF_RANGE = 4 };
/* Allowed ranges, from chemistry.errors via the caller: low and high of temperature, salinity,
 * the first and the second given quantity. Nutrients must be finite and not negative, shifts
 * finite. */
enum { LIM_T, LIM_S = 2, LIM_A = 4, LIM_B = 6, N_LIMITS = 8 };

typedef struct {
    const double *data; /* NULL: the value is zero (an absent shift or nutrient) */
    ptrdiff_t stride;   /* in elements; 0 for a broadcast scalar */
} column;

/* One block of waters: the constants and the quantities the solve needs, one array each. */
typedef struct {
    double t[BLOCK], s[BLOCK], po4[BLOCK], si[BLOCK], a[BLOCK], b[BLOCK];
    double shift[N_SHIFTS][BLOCK];
    double inv_tk[BLOCK], ln_tk[BLOCK], sqrt_s[BLOCK], ionic[BLOCK], sqrt_i[BLOCK];
    double ln_solution_to_water[BLOCK], k2[BLOCK];
    double k0[BLOCK], fugacity[BLOCK], k1[BLOCK], k1k2[BLOCK], kb[BLOCK], kw[BLOCK], ks[BLOCK];
    double kf[BLOCK], k1p[BLOCK], k1p_k2p[BLOCK], k1p_k2p_k3p[BLOCK], ksi[BLOCK];
    double inv_ksp_a[BLOCK], inv_ksp_c[BLOCK], total_boron[BLOCK], total_sulfate[BLOCK];
    double total_fluoride[BLOCK], calcium[BLOCK], free_fraction[BLOCK];
    double off_free[BLOCK], off_seawater[BLOCK], off_nbs[BLOCK];
    double h[BLOCK], alk[BLOCK], dic[BLOCK], co2_given[BLOCK], pco2_given[BLOCK], ph_total[BLOCK];
    double low[BLOCK], high[BLOCK], non[BLOCK], dnon[BLOCK];
    double out[N_OUTPUTS][BLOCK];
    int active[BLOCK];
} block;

INLINE void load(const column *c, ptrdiff_t start, int m, double *restrict dest, double scale) {
    if (c->data == NULL) {
        for (int i = 0; i < m; i++) dest[i] = 0.0;
    } else if (c->stride == 0) {
        double value = c->data[0] * scale;
        for (int i = 0; i < m; i++) dest[i] = value;
    } else if (c->stride == 1) {
        const double *restrict src = c->data + start;
        for (int i = 0; i < m; i++) dest[i] = src[i] * scale;
    } else {
        const double *src = c->data + start * c->stride;
        for (int i = 0; i < m; i++) dest[i] = src[i * c->stride] * scale;
    }
}

/* constants.compute_constants (zero pressure), the shifts of solver._shifted and the offsets of
 * scales.ph_offsets_from_total, for m waters. */
INLINE void constants(block *restrict w, int m, int carbonic, int lee2010, int nutrients,
                      int shifted) {
    /* Each choice (K1-K2 set, nutrients, shifts) has a loop of its own: a choice inside a loop
     * would have the vectorised loop compute both sides, exp calls and all. */
    for (int i = 0; i < m; i++) {
        double t = w->t[i], s = w->s[i];
        double tk = t + ZERO_CELSIUS_K; /* constants._Terms */
        double inv_tk = 1.0 / tk, ln_tk = log(tk), sqrt_s = sqrt(s);
        double ionic = 19.924 * s / (1000.0 - 1.005 * s); /* constants._ionic_strength */
        double sqrt_i = sqrt(ionic);
        double ln_solution_to_water = log(1.0 - 0.001005 * s);
        w->inv_tk[i] = inv_tk;
        w->ln_tk[i] = ln_tk;
        w->sqrt_s[i] = sqrt_s;
        w->ionic[i] = ionic;
        w->sqrt_i[i] = sqrt_i;
        w->ln_solution_to_water[i] = ln_solution_to_water;

        double tk100 = 0.01 * tk; /* _k0_weiss1974 */
        double k0 = exp(-60.2409 + 93.4517 * 100.0 * inv_tk + 23.3585 * (ln_tk - log(100.0)) +
                        s * (0.023517 + tk100 * (0.0047036 * tk100 - 0.023656)));
        /* fugacity_factor_weiss1974 at 1 atm */
        double virial_b = -1636.75 + tk * (12.0408 + tk * (-3.27957e-2 + tk * 3.16528e-5));
        double cross_delta = 57.7 - 0.118 * tk;
        double fugacity = exp((virial_b + 2.0 * cross_delta) / (GAS_CONSTANT_CM3_ATM * tk));

        double kf = exp(874.0 * inv_tk - 9.68 + 0.111 * sqrt_s);   /* _kf_perez_fraga1987 */
        double total_fluoride = (0.000067 / 18.998 / 1.80655) * s; /* total_fluoride_riley1965 */
        double kb =
            exp(/* _kb_dickson1990 */
                (-8966.90 - 2890.53 * sqrt_s - 77.942 * s + 1.728 * s * sqrt_s - 0.0996 * s * s) *
                    inv_tk +
                148.0248 + 137.1942 * sqrt_s + 1.62142 * s -
                (24.4344 + 25.085 * sqrt_s + 0.2474 * s) * ln_tk + 0.053105 * sqrt_s * tk);
        double kw = exp(148.9652 - 13847.26 * inv_tk - 23.6521 * ln_tk + /* _kw_millero1995 */
                        (118.67 * inv_tk - 5.977 + 1.0495 * ln_tk) * sqrt_s - 0.01615 * s);
        double ks =
            exp(-4276.1 * inv_tk + 141.328 - 23.093 * ln_tk + /* _ks_dickson1990 */
                (-13856.0 * inv_tk + 324.57 - 47.986 * ln_tk) * sqrt_i +
                (35474.0 * inv_tk - 771.54 + 114.723 * ln_tk) * ionic +
                (-2698.0 * sqrt_i + 1776.0 * ionic) * inv_tk * ionic + ln_solution_to_water);
        double total_sulfate = (0.1400 / 96.062 / 1.80655) * s; /* morris_riley1966 */
        /* 1 / Ksp straight from the exponent: the saturation states then need no division. */
        double inv_ksp_c =
            exp(-LN10 * (/* _ksp_calcite_mucci1983 */
                         -171.9065 - 0.077993 * tk + 2839.319 * inv_tk + 71.595 * INV_LN10 * ln_tk +
                         (-0.77712 + 0.0028426 * tk + 178.34 * inv_tk) * sqrt_s +
                         s * (0.0041249 * sqrt_s - 0.07711)));
        double inv_ksp_a =
            exp(-LN10 * (/* _ksp_aragonite_mucci1983 */
                         -171.945 - 0.077993 * tk + 2903.293 * inv_tk + 71.595 * INV_LN10 * ln_tk +
                         (-0.068393 + 0.0017276 * tk + 88.135 * inv_tk) * sqrt_s +
                         s * (0.0059415 * sqrt_s - 0.10018)));
        double total_boron = (lee2010 ? 0.0004326 / 35.0 : 0.000416 / 35.0) * s;
        double calcium = (0.02128 / 40.078 / 1.80655) * s; /* calcium_riley_tongudai1967 */

        /* scales.hydrogen_activity_coefficient_takahashi1982 and ph_offsets_from_total */
        double f_h = 1.2948 - 0.002036 * tk + (0.0004607 - 0.000001475 * tk) * s * s;
        double free = log(1.0 + total_sulfate / ks) * INV_LN10;
        double seawater = -log(1.0 + total_fluoride / kf) * INV_LN10;

        w->k0[i] = k0;
        w->fugacity[i] = fugacity;
        w->kb[i] = kb;
        w->kw[i] = kw;
        w->ks[i] = ks;
        w->kf[i] = kf;
        w->inv_ksp_a[i] = inv_ksp_a;
        w->inv_ksp_c[i] = inv_ksp_c;
        w->total_boron[i] = total_boron;
        w->total_sulfate[i] = total_sulfate;
        w->total_fluoride[i] = total_fluoride;
        w->calcium[i] = calcium;
        w->free_fraction[i] = 1.0 / (1.0 + total_sulfate / ks);
        w->off_free[i] = free;
        w->off_seawater[i] = seawater;
        w->off_nbs[i] = seawater - log(f_h) * INV_LN10;
    }

    if (carbonic == 0)
        for (int i = 0; i < m; i++) { /* _k1_lueker2000, _k2_lueker2000 */
            double inv_tk = w->inv_tk[i], ln_tk = w->ln_tk[i], s = w->s[i];
            double pk1 =
                3633.86 * inv_tk - 61.2172 + 9.6777 * ln_tk + s * (0.0001152 * s - 0.011555);
            double pk2 =
                471.78 * inv_tk + 25.9290 - 3.16967 * ln_tk + s * (0.0001122 * s - 0.01781);
            w->k1[i] = exp(-LN10 * pk1);
            w->k2[i] = exp(-LN10 * pk2);
        }
    else
        for (int i = 0; i < m; i++) { /* _k1/_k2_millero2010_seawater_scale, to the total scale */
            double inv_tk = w->inv_tk[i], ln_tk = w->ln_tk[i], s = w->s[i], sqrt_s = w->sqrt_s[i];
            double pk1_pure = -126.34048 + 6320.813 * inv_tk + 19.568224 * ln_tk;
            double a1 = 13.4038 * sqrt_s + 0.03206 * s - 5.242e-5 * s * s;
            double b1 = -530.659 * sqrt_s - 5.8210 * s;
            double c1 = -2.0664 * sqrt_s;
            double pk2_pure = -90.18333 + 5143.692 * inv_tk + 14.613358 * ln_tk;
            double a2 = 21.3728 * sqrt_s + 0.1218 * s - 3.688e-4 * s * s;
            double b2 = -788.289 * sqrt_s - 19.189 * s;
            double c2 = -3.374 * sqrt_s;
            double to_total =
                1.0 / (1.0 + w->total_fluoride[i] / w->kf[i]); /* _seawater_to_total_factor */
            w->k1[i] = exp(-LN10 * (pk1_pure + a1 + b1 * inv_tk + c1 * ln_tk)) * to_total;
            w->k2[i] = exp(-LN10 * (pk2_pure + a2 + b2 * inv_tk + c2 * ln_tk)) * to_total;
        }
    if (nutrients)
        for (int i = 0; i < m; i++) { /* _k1p, _k2p, _k3p, _ksi_millero1995 */
            double inv_tk = w->inv_tk[i], ln_tk = w->ln_tk[i], s = w->s[i], sqrt_s = w->sqrt_s[i];
            double ionic = w->ionic[i], sqrt_i = w->sqrt_i[i];
            double k1p =
                exp(-4576.752 * inv_tk + 115.525 - 18.453 * ln_tk +
                    (-106.736 * inv_tk + 0.69171) * sqrt_s + (-0.65643 * inv_tk - 0.01844) * s);
            double k2p =
                exp(-8814.715 * inv_tk + 172.0883 - 27.927 * ln_tk +
                    (-160.340 * inv_tk + 1.3566) * sqrt_s + (0.37335 * inv_tk - 0.05778) * s);
            double k3p = exp(-3070.75 * inv_tk - 18.141 + (17.27039 * inv_tk + 2.81197) * sqrt_s +
                             (-44.99486 * inv_tk - 0.09984) * s);
            double ksi =
                exp(-8904.2 * inv_tk + 117.385 - 19.334 * ln_tk +
                    (-458.79 * inv_tk + 3.5913) * sqrt_i + (188.74 * inv_tk - 1.5998) * ionic +
                    (-12.1652 * inv_tk + 0.07871) * ionic * ionic + w->ln_solution_to_water[i]);
            w->k1p[i] = k1p;
            w->k1p_k2p[i] = k1p * k2p;
            w->k1p_k2p_k3p[i] = k1p * k2p * k3p;
            w->ksi[i] = ksi;
        }
    if (shifted)
        for (int i = 0; i < m;
             i++) { /* solver._shifted: K times 10**-shift, boron times (1 + shift) */
            w->k0[i] *= exp(-LN10 * w->shift[SH_K0][i]);
            w->k1[i] *= exp(-LN10 * w->shift[SH_K1][i]);
            w->k2[i] *= exp(-LN10 * w->shift[SH_K2][i]);
            w->kb[i] *= exp(-LN10 * w->shift[SH_KB][i]);
            w->kw[i] *= exp(-LN10 * w->shift[SH_KW][i]);
            w->inv_ksp_a[i] *= exp(LN10 * w->shift[SH_KSPA][i]);
            w->inv_ksp_c[i] *= exp(LN10 * w->shift[SH_KSPC][i]);
            w->total_boron[i] *= 1.0 + w->shift[SH_BORON][i];
        }
    for (int i = 0; i < m; i++) w->k1k2[i] = w->k1[i] * w->k2[i];
}

/* solver._Water.noncarbonate: alkalinity of everything but the carbonate system, and d/dh. */
INLINE double noncarbonate(const block *restrict w, int i, double h, int nutrients,
                           double *restrict dalk) {
    /* Reciprocals once, products after: a division costs several multiplications. */
    double inv_borate_den = 1.0 / (w->kb[i] + h);
    double inv_h = 1.0 / h;
    double free_fraction = w->free_fraction[i];
    double h_free = free_fraction * h;
    double inv_sulfate_den = 1.0 / (h_free + w->ks[i]);
    double inv_fluoride_den = 1.0 / (h + w->kf[i]);
    double borate = w->total_boron[i] * w->kb[i] * inv_borate_den;
    double hydroxide = w->kw[i] * inv_h;
    double alk = borate + hydroxide - h_free - w->total_sulfate[i] * h_free * inv_sulfate_den -
                 w->total_fluoride[i] * h * inv_fluoride_den;
    double d = -borate * inv_borate_den - hydroxide * inv_h - free_fraction -
               w->total_sulfate[i] * free_fraction * w->ks[i] * inv_sulfate_den * inv_sulfate_den -
               w->total_fluoride[i] * w->kf[i] * inv_fluoride_den * inv_fluoride_den;
    if (nutrients) { /* _Water._nutrient_alkalinity */
        double h2 = h * h, h3 = h2 * h;
        double k1p = w->k1p[i], k12 = w->k1p_k2p[i], k123 = w->k1p_k2p_k3p[i], ksi = w->ksi[i];
        double p_den = h3 + k1p * h2 + k12 * h + k123;
        double p_num = k12 * h + 2.0 * k123 - h3;
        double si_den = ksi + h;
        alk += w->po4[i] * p_num / p_den + w->si[i] * ksi / si_den;
        double dp_num = k12 - 3.0 * h2;
        double dp_den = 3.0 * h2 + 2.0 * k1p * h + k12;
        d += w->po4[i] * (dp_num * p_den - p_num * dp_den) / (p_den * p_den) -
             w->si[i] * ksi / (si_den * si_den);
    }
    *dalk = d;
    return alk;
}

/* solver._Water.water_root: [H+]_T where (KW + extra_kw)/h - free_fraction h = level. */
INLINE double water_root(const block *restrict w, int i, double level, double extra_kw) {
    double kw = w->kw[i] + extra_kw;
    double c = w->free_fraction[i];
    double root = sqrt(level * level + 4.0 * c * kw);
    return level >= 0.0 ? 2.0 * kw / (level + root) : (root - level) / (2.0 * c);
}

/* solver._Water.bounds (Munhoven2013). */
INLINE void bounds(const block *restrict w, int i, int nutrients, double *low, double *high) {
    *low = -w->total_sulfate[i] - w->total_fluoride[i] - (nutrients ? w->po4[i] : 0.0);
    *high = w->total_boron[i] + (nutrients ? 2.0 * w->po4[i] + w->si[i] : 0.0);
}

/* Alkalinity at [H+] = h for the given DIC (co2 < 0) or CO2 (solver._alkalinity_at_dic and
 * _alkalinity_at_co2), and its d/dh. */
INLINE double alkalinity_at(const block *restrict w, int i, double h, int with_dic, int nutrients,
                            double *restrict slope) {
    double dnon;
    double non = noncarbonate(w, i, h, nutrients, &dnon);
    double k1 = w->k1[i], k1k2 = w->k1k2[i];
    if (with_dic) { /* solver._carbonate_fraction */
        double k1h = k1 * h;
        double inv_den = 1.0 / (h * h + k1h + k1k2);
        double frac = (k1h + 2.0 * k1k2) * inv_den;
        double dfrac = (k1 - frac * (2.0 * h + k1)) * inv_den;
        *slope = w->dic[i] * dfrac + dnon;
        return w->dic[i] * frac + non;
    }
    double co2 = w->co2_given[i], inv_h = 1.0 / h, inv_h2 = inv_h * inv_h;
    *slope = -co2 * (k1 * h + 4.0 * k1k2) * inv_h2 * inv_h + dnon;
    return co2 * (k1 * h + 2.0 * k1k2) * inv_h2 + non;
}

/* solver._newton_array over one block: every element steps until its own test is met; the
 * loop over the block runs with a mask so that it vectorises. */
INLINE void newton(block *restrict w, int m, int with_dic, int nutrients) {
    for (int i = 0; i < m; i++) {
        double h = w->h[i];
        if (!(h >= w->low[i] && h <= w->high[i])) w->h[i] = sqrt(w->low[i] * w->high[i]);
        w->active[i] = 1;
    }
    for (int iteration = 0; iteration < MAX_ITERATIONS; iteration++) {
        int remaining = 0;
        for (int i = 0; i < m; i++) {
            double h = w->h[i], slope;
            double residual = alkalinity_at(w, i, h, with_dic, nutrients, &slope) - w->alk[i];
            double low = residual > 0.0 ? h : w->low[i];
            double high = residual > 0.0 ? w->high[i] : h;
            double step = residual / slope;
            double next = h - step;
            int outside = !(next >= low && next <= high);
            int done = (!outside && fabs(step) <= RELATIVE_TOLERANCE * next) ||
                       (outside && high - low <= RELATIVE_TOLERANCE * low);
            next = outside ? sqrt(low * high) : next;
            int active = w->active[i];
            w->h[i] = active ? next : h;
            w->low[i] = active ? low : w->low[i];
            w->high[i] = active ? high : w->high[i];
            w->active[i] = active & !done;
            remaining += active & !done;
        }
        if (remaining == 0) break;
    }
}

/* [H+] from alkalinity with DIC or with CO2: solver._h_from_alkalinity_dic and
 * _h_from_alkalinity_co2 (bracket, starting value, Newton). */
INLINE void h_from_alkalinity(block *restrict w, int m, int with_dic, int nutrients) {
    for (int i = 0; i < m; i++) {
        double low_bound, high_bound, alk = w->alk[i], k1 = w->k1[i], k1k2 = w->k1k2[i];
        bounds(w, i, nutrients, &low_bound, &high_bound);
        double carbonate_alk = alk - w->total_boron[i] * w->kb[i] / (w->kb[i] + 1e-8);
        double h0;
        if (with_dic) {
            double dic = w->dic[i];
            w->low[i] = water_root(w, i, alk - low_bound, 0.0);
            w->high[i] = water_root(w, i, alk - (high_bound + 2.0 * dic), 0.0);
            double b = (dic - carbonate_alk) * k1;
            double disc = b * b - 4.0 * carbonate_alk * (carbonate_alk - 2.0 * dic) * k1k2;
            h0 = (b + sqrt(disc)) / (2.0 * carbonate_alk);
            /* One refinement: borate and water at the first estimate instead of at pH 8. */
            double unused;
            double non = noncarbonate(w, i, h0 > 0.0 ? h0 : 1e-8, nutrients, &unused);
            carbonate_alk = alk - non;
            b = (dic - carbonate_alk) * k1;
            disc = b * b - 4.0 * carbonate_alk * (carbonate_alk - 2.0 * dic) * k1k2;
            h0 = h0 > 0.0 ? (b + sqrt(disc)) / (2.0 * carbonate_alk) : h0;
        } else {
            double co2 = w->co2_given[i];
            double low = water_root(w, i, alk - low_bound, co2 * k1);
            w->low[i] = low;
            w->high[i] =
                water_root(w, i, alk - high_bound - 2.0 * co2 * k1k2 / (low * low), co2 * k1);
            double b = co2 * k1;
            double disc = b * b + 8.0 * carbonate_alk * co2 * k1k2;
            h0 = (b + sqrt(disc)) / (2.0 * carbonate_alk);
        }
        w->h[i] = h0;
    }
    newton(w, m, with_dic, nutrients);
}

/* The first element (from 0) of m where flag is set, or -1. */
static int first_set(const int *flag, int m) {
    for (int i = 0; i < m; i++)
        if (flag[i]) return i;
    return -1;
}

/* One block of m waters. Inlined into a copy per nutrient case (below), so that the loops
 * carry no branch the compiler cannot take out of them and so vectorise. */
INLINE int solve_block(block *restrict w, int m, int pair, int ph_scale, int nutrients,
                       int carbonic, int lee2010, int shifted, int *bad) {
    constants(w, m, carbonic, lee2010, nutrients, shifted);
    int *flag = w->active;
    int ph_given = pair == PH_ALK || pair == PH_DIC || pair == PH_PCO2;
    int alk_first = pair == ALK_DIC || pair == ALK_PCO2;
    int pco2_given = pair == PH_PCO2 || pair == ALK_PCO2 || pair == DIC_PCO2;
    int alk_given = pair == PH_ALK || alk_first;

    for (int i = 0; i < m; i++) {
        double a = w->a[i] * MICRO, b = w->b[i] * MICRO;
        w->alk[i] = pair == PH_ALK ? b : alk_first ? a : 0.0;
        w->dic[i] = (pair == PH_DIC || pair == ALK_DIC) ? b : pair == DIC_PCO2 ? a : 0.0;
        double pco2 = pco2_given ? b : 0.0;
        w->pco2_given[i] = pco2;
        w->co2_given[i] = pco2 * w->fugacity[i] * w->k0[i];
    }
    if (ph_given) {
        const double *offset = ph_scale == SCALE_FREE       ? w->off_free
                               : ph_scale == SCALE_SEAWATER ? w->off_seawater
                                                            : w->off_nbs;
        int on_total = ph_scale == SCALE_TOTAL;
        for (int i = 0; i < m; i++) {
            double ph_total = w->a[i] - (on_total ? 0.0 : offset[i]);
            w->ph_total[i] = ph_total;
            w->h[i] = exp(-LN10 * ph_total);
        }
    }

    if (pair == PH_ALK) {
        for (int i = 0; i < m; i++) {
            double h = w->h[i], k1 = w->k1[i], k1k2 = w->k1k2[i], dnon;
            double k1h = k1 * h;
            double frac = (k1h + 2.0 * k1k2) / (h * h + k1h + k1k2);
            double non = noncarbonate(w, i, h, nutrients, &dnon);
            w->non[i] = non; /* kept for the outputs: the same [H+] */
            w->dnon[i] = dnon;
            double dic = (w->alk[i] - non) / frac;
            flag[i] = dic < -DIC_ROUNDING; /* rounding leaves about 1e-16 where there is none */
            w->dic[i] = dic > 0.0 ? dic : 0.0;
        }
        if ((*bad = first_set(flag, m)) >= 0) return NEGATIVE_DIC;
    } else if (pair == PH_PCO2) {
        for (int i = 0; i < m; i++) {
            double h = w->h[i];
            w->dic[i] = w->co2_given[i] * (h * h + w->k1[i] * h + w->k1k2[i]) / (h * h);
        }
    } else if (pair == ALK_DIC || pair == ALK_PCO2) {
        if (pair == ALK_DIC) /* two calls, so that with_dic is a constant in each */
            h_from_alkalinity(w, m, 1, nutrients);
        else
            h_from_alkalinity(w, m, 0, nutrients);
        if (pair == ALK_PCO2)
            for (int i = 0; i < m; i++) {
                double h = w->h[i];
                w->dic[i] = w->co2_given[i] * (h * h + w->k1[i] * h + w->k1k2[i]) / (h * h);
            }
    } else if (pair == DIC_PCO2) { /* alpha0 = CO2/DIC gives a quadratic in h */
        for (int i = 0; i < m; i++) {
            double dic = w->dic[i];
            double alpha0 = dic > 0.0 ? w->co2_given[i] / dic : INFINITY;
            flag[i] = alpha0 >= 1.0;
            double b = alpha0 * w->k1[i];
            double root = sqrt(b * b + 4.0 * (1.0 - alpha0) * alpha0 * w->k1k2[i]);
            w->h[i] = (b + root) / (2.0 * (1.0 - alpha0));
        }
        if ((*bad = first_set(flag, m)) >= 0) return CO2_ABOVE_DIC;
        for (int i = 0; i < m; i++) flag[i] = w->h[i] <= 0.0;
        if ((*bad = first_set(flag, m)) >= 0) return PH_UNDEFINED;
    }

    /* solver._solve_numeric: the species and derived quantities at the final [H+]. */
    for (int i = 0; i < m; i++) {
        double h = w->h[i], k1 = w->k1[i], k1k2 = w->k1k2[i], dic = w->dic[i], dnon;
        double ph_from_h = -log(h) * INV_LN10; /* unconditional: a branch stops vectorising */
        double ph_in = w->ph_total[i], pco2_in = w->pco2_given[i];
        double ph_total = ph_given ? ph_in : ph_from_h; /* selects of loaded values, no branch */
        double k1h = k1 * h;
        double inv_den = 1.0 / (h * h + k1h + k1k2);
        double frac = (k1h + 2.0 * k1k2) * inv_den;
        double dfrac = (k1 - frac * (2.0 * h + k1)) * inv_den;
        double non = pair == PH_ALK ? w->non[i] : noncarbonate(w, i, h, nutrients, &dnon);
        dnon = pair == PH_ALK ? w->dnon[i] : dnon;
        double alk_from_dic = dic * frac + non;
        double dic_den = dic * inv_den;
        double co2 = dic_den * (h * h);
        double carbonate = dic_den * k1k2;
        double fco2 = co2 / w->k0[i];
        double pco2_from_fco2 = fco2 / w->fugacity[i];
        double pco2 = pco2_given ? pco2_in : pco2_from_fco2;
        double calcium_carbonate = w->calcium[i] * carbonate;
        /* Revelle factor: d ln CO2 / d ln DIC along constant alkalinity. */
        double dalk_dh = dic * dfrac + dnon;
        double dlnco2_dh = 2.0 / h - (2.0 * h + k1) * inv_den;
        w->out[OUT_PH_TOTAL][i] = ph_total;
        w->out[OUT_PH_FREE][i] = ph_total + w->off_free[i];
        w->out[OUT_PH_SEAWATER][i] = ph_total + w->off_seawater[i];
        w->out[OUT_PH_NBS][i] = ph_total + w->off_nbs[i];
        w->out[OUT_ALK][i] =
            alk_from_dic * PER_MICRO; /* replaced below when alkalinity was given */
        w->out[OUT_DIC][i] = dic * PER_MICRO;
        w->out[OUT_CO2][i] = co2 * PER_MICRO;
        w->out[OUT_HCO3][i] = dic_den * k1h * PER_MICRO;
        w->out[OUT_CO3][i] = carbonate * PER_MICRO;
        w->out[OUT_PCO2][i] = pco2 * PER_MICRO;
        w->out[OUT_FCO2][i] = fco2 * PER_MICRO;
        w->out[OUT_OMEGA_A][i] = calcium_carbonate * w->inv_ksp_a[i];
        w->out[OUT_OMEGA_C][i] = calcium_carbonate * w->inv_ksp_c[i];
        w->out[OUT_REVELLE][i] = 1.0 - dic * dlnco2_dh * frac / dalk_dh;
    }
    /* A select inside the loop above keeps gcc 12 from vectorising it: a loop of its own. */
    if (alk_given)
        for (int i = 0; i < m; i++) w->out[OUT_ALK][i] = w->alk[i] * PER_MICRO;
    return OK;
}

/* Whether every value lies in [low, high]; NaN does not. Bitwise, so that it vectorises. */
INLINE int within(const double *restrict x, int m, double low, double high) {
    int outside = 0;
    for (int i = 0; i < m; i++) outside |= (x[i] < low) | (x[i] > high) | (x[i] != x[i]);
    return !outside;
}

/* Lowest and highest value of a block into extremes[0] and extremes[1] (for the validity
 * warnings). Eight running lanes, each a select: a plain min/max reduction does not vectorise
 * without -ffast-math. The values are already known not to be NaN. */
#define LANES 8
INLINE void extend(const double *restrict x, int m, double *extremes) {
    double low[LANES], high[LANES];
    for (int j = 0; j < LANES; j++) {
        low[j] = extremes[0];
        high[j] = extremes[1];
    }
    int whole = m - m % LANES;
    for (int i = 0; i < whole; i += LANES)
        for (int j = 0; j < LANES; j++) {
            double v = x[i + j];
            low[j] = v < low[j] ? v : low[j];
            high[j] = v > high[j] ? v : high[j];
        }
    for (int i = whole; i < m; i++) {
        low[0] = x[i] < low[0] ? x[i] : low[0];
        high[0] = x[i] > high[0] ? x[i] : high[0];
    }
    for (int j = 0; j < LANES; j++) {
        extremes[0] = low[j] < extremes[0] ? low[j] : extremes[0];
        extremes[1] = high[j] > extremes[1] ? high[j] : extremes[1];
    }
}

/* Copy one block's row of an output to its place. The outputs of a large solve (112 bytes a
 * reading) are far larger than the caches and are not read back here: on x86-64, streaming
 * stores write them without first reading each line into the cache. */
INLINE void store_row(double *restrict dest, const double *restrict src, int m) {
#if defined(__SSE2__)
    if (((uintptr_t)dest & 15) == 0) {
        int i = 0;
        for (; i + 2 <= m; i += 2) _mm_stream_pd(dest + i, _mm_loadu_pd(src + i));
        for (; i < m; i++) dest[i] = src[i];
        return;
    }
#endif
    memcpy(dest, src, (size_t)m * sizeof(double));
}

/* Every block of waters begin to end (of n): load, check, solve, store. Returns OK, OUT_OF_RANGE or
 * the code of the first inconsistent water (its index in *bad_index). */
INLINE int solve_all(block *restrict w, ptrdiff_t n, ptrdiff_t begin, ptrdiff_t end,
                     const column *inputs, const column *shifts, int pair, int ph_scale,
                     int nutrients, int carbonic, int lee2010, const double *limits, double *out,
                     double *extremes, ptrdiff_t *bad_index) {
    for (ptrdiff_t start = begin; start < end; start += BLOCK) {
        int m = (int)(end - start < BLOCK ? end - start : BLOCK);
        load(&inputs[IN_T], start, m, w->t, 1.0);
        load(&inputs[IN_S], start, m, w->s, 1.0);
        load(&inputs[IN_PO4], start, m, w->po4, MICRO);
        load(&inputs[IN_SI], start, m, w->si, MICRO);
        load(&inputs[IN_A], start, m, w->a, 1.0);
        load(&inputs[IN_B], start, m, w->b, 1.0);
        int valid = within(w->t, m, limits[LIM_T], limits[LIM_T + 1]) &
                    within(w->s, m, limits[LIM_S], limits[LIM_S + 1]) &
                    within(w->a, m, limits[LIM_A], limits[LIM_A + 1]) &
                    within(w->b, m, limits[LIM_B], limits[LIM_B + 1]) &
                    within(w->po4, m, 0.0, DBL_MAX) & within(w->si, m, 0.0, DBL_MAX);
        if (shifts != NULL)
            for (int k = 0; k < N_SHIFTS; k++) {
                load(&shifts[k], start, m, w->shift[k], 1.0);
                valid &= within(w->shift[k], m, -DBL_MAX, DBL_MAX);
            }
        if (!valid) return OUT_OF_RANGE; /* the caller's own checks name the value */
        extend(w->t, m, extremes);
        extend(w->s, m, extremes + 2);
        int bad = -1;
        int code =
            solve_block(w, m, pair, ph_scale, nutrients, carbonic, lee2010, shifts != NULL, &bad);
        if (code != OK) {
            *bad_index = start + bad;
            return code;
        }
        for (int k = 0; k < N_OUTPUTS; k++) store_row(out + (ptrdiff_t)k * n + start, w->out[k], m);
    }
    return OK;
}

/* A copy of solve_all for each pair and nutrient case, each compiled for three instruction
 * sets: with the pair and the nutrients constant, every test on them leaves the loops. */
typedef int (*pair_solver)(block *restrict, ptrdiff_t, ptrdiff_t, ptrdiff_t, const column *,
                           const column *, int, int, int, const double *, double *, double *,
                           ptrdiff_t *);
#define PAIR_SOLVER(NAME, PAIR, NUTRIENTS)                                                         \
    SPATLINE_CLONES static int NAME(block *restrict w, ptrdiff_t n, ptrdiff_t begin,               \
                                    ptrdiff_t end, const column *inputs, const column *shifts,     \
                                    int ph_scale, int carbonic, int lee2010, const double *limits, \
                                    double *out, double *extremes, ptrdiff_t *bad_index) {         \
        return solve_all(w, n, begin, end, inputs, shifts, PAIR, ph_scale, NUTRIENTS, carbonic,    \
                         lee2010, limits, out, extremes, bad_index);                               \
    }
PAIR_SOLVER(solve_ph_alk, PH_ALK, 0)
PAIR_SOLVER(solve_ph_dic, PH_DIC, 0)
PAIR_SOLVER(solve_ph_pco2, PH_PCO2, 0)
PAIR_SOLVER(solve_alk_dic, ALK_DIC, 0)
PAIR_SOLVER(solve_alk_pco2, ALK_PCO2, 0)
PAIR_SOLVER(solve_dic_pco2, DIC_PCO2, 0)
PAIR_SOLVER(solve_ph_alk_nutrients, PH_ALK, 1)
PAIR_SOLVER(solve_ph_dic_nutrients, PH_DIC, 1)
PAIR_SOLVER(solve_ph_pco2_nutrients, PH_PCO2, 1)
PAIR_SOLVER(solve_alk_dic_nutrients, ALK_DIC, 1)
PAIR_SOLVER(solve_alk_pco2_nutrients, ALK_PCO2, 1)
PAIR_SOLVER(solve_dic_pco2_nutrients, DIC_PCO2, 1)

static const pair_solver PAIR_SOLVERS[2][6] = {
    {solve_ph_alk, solve_ph_dic, solve_ph_pco2, solve_alk_dic, solve_alk_pco2, solve_dic_pco2},
    {solve_ph_alk_nutrients, solve_ph_dic_nutrients, solve_ph_pco2_nutrients,
     solve_alk_dic_nutrients, solve_alk_pco2_nutrients, solve_dic_pco2_nutrients},
};

/* One thread's share of a solve. */
typedef struct {
    pair_solver solver;
    ptrdiff_t n, begin, end;
    const column *inputs, *shifts;
    int ph_scale, carbonic, lee2010;
    const double *limits;
    double *out;
    double extremes[4];
    ptrdiff_t bad_index;
    int code;
} share;

static void *solve_share(void *argument) {
    share *task = argument;
    task->extremes[0] = task->extremes[2] = INFINITY;
    task->extremes[1] = task->extremes[3] = -INFINITY;
    task->bad_index = -1;
    block *w = PyMem_RawMalloc(sizeof(block));
    if (w == NULL) {
        task->code = -1;
        return NULL;
    }
    task->code = task->solver(w, task->n, task->begin, task->end, task->inputs, task->shifts,
                              task->ph_scale, task->carbonic, task->lee2010, task->limits,
                              task->out, task->extremes, &task->bad_index);
#if defined(__SSE2__)
    _mm_sfence(); /* the streamed rows are visible before the caller reads them */
#endif
    PyMem_RawFree(w);
    return NULL;
}

#define MAX_THREADS 16

/*
 * Solve n waters, split over up to `threads` threads (contiguous shares, one each). inputs:
 * N_INPUTS columns (temperature, salinity, phosphate and silicate in umol/kg, the first and the
 * second given quantity in the units of solve()); shifts: NULL or N_SHIFTS columns; limits:
 * N_LIMITS allowed bounds; out: N_OUTPUTS rows of n values; extremes: lowest and highest
 * temperature, then salinity. Returns OK, OUT_OF_RANGE for an input outside its limits, or the
 * code of the first inconsistent water, whose index goes to *bad_index; -1 when out of memory.
 */
int spatline_solve(ptrdiff_t n, const column *inputs, const column *shifts, int pair, int ph_scale,
                   int carbonic, int lee2010, int nutrients, const double *limits, double *out,
                   double *extremes, ptrdiff_t *bad_index, int threads) {
    if (pair < 0 || pair > DIC_PCO2) return -2;
    if (threads < 1) threads = 1;
    if (threads > MAX_THREADS) threads = MAX_THREADS;
#if !SPATLINE_THREADS
    threads = 1;
#endif
    share tasks[MAX_THREADS];
    /* Shares in whole blocks, so that no block straddles two threads. */
    ptrdiff_t blocks = (n + BLOCK - 1) / BLOCK;
    if (threads > blocks) threads = (int)(blocks > 0 ? blocks : 1);
    for (int k = 0; k < threads; k++) {
        share *task = &tasks[k];
        task->solver = PAIR_SOLVERS[nutrients != 0][pair];
        task->n = n;
        task->begin = blocks * k / threads * BLOCK;
        task->end = k + 1 == threads ? n : blocks * (k + 1) / threads * BLOCK;
        task->inputs = inputs;
        task->shifts = shifts;
        task->ph_scale = ph_scale;
        task->carbonic = carbonic;
        task->lee2010 = lee2010;
        task->limits = limits;
        task->out = out;
    }
#if SPATLINE_THREADS
    pthread_t handles[MAX_THREADS];
    int started[MAX_THREADS] = {0};
    for (int k = 1; k < threads; k++)
        started[k] = pthread_create(&handles[k], NULL, solve_share, &tasks[k]) == 0;
    solve_share(&tasks[0]);
    for (int k = 1; k < threads; k++) {
        if (started[k])
            pthread_join(handles[k], NULL);
        else
            solve_share(&tasks[k]); /* no thread to be had: this one does that share too */
    }
#else
    solve_share(&tasks[0]);
#endif
    /* The first failure in reading order wins, as if one thread had gone through them all. */
    extremes[0] = extremes[2] = INFINITY;
    extremes[1] = extremes[3] = -INFINITY;
    for (int k = 0; k < threads; k++) {
        share *task = &tasks[k];
        if (task->code != OK) {
            *bad_index = task->bad_index;
            return task->code;
        }
        extremes[0] = fmin(extremes[0], task->extremes[0]);
        extremes[1] = fmax(extremes[1], task->extremes[1]);
        extremes[2] = fmin(extremes[2], task->extremes[2]);
        extremes[3] = fmax(extremes[3], task->extremes[3]);
    }
    return OK;
}

/* An importable module, so that the build and the import follow Python's own rules; the
 * solver calls spatline_solve through ctypes on this module's file. */
static struct PyModuleDef kernel_module = {
    PyModuleDef_HEAD_INIT,
    "_kernel",
    "Compiled array path of chemistry.solver.solve (called through ctypes).",
    -1,
    NULL,
};

PyMODINIT_FUNC PyInit__kernel(void) { return PyModule_Create(&kernel_module); }
