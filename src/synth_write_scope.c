/* Scope imperfections of simulated channels: seeded Gaussian noise, clipping, ADC quantisation. */
#include "synth_write.h"

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>
#include <math.h>

/* splitmix64 (S. Vigna's public-domain reference, after G. Steele, D. Lea and
 * C. Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014): the
 * seeding generator the xoshiro authors recommend. */
static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
}

static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }

void tf_sw_rng_seed(tf_sw_rng *r, uint64_t seed, uint64_t stream)
{
    /* mix the stream into the seed first so (seed, stream) pairs do not overlap */
    uint64_t x = seed;
    uint64_t y = splitmix64(&x) ^ (stream * 0xd1b54a32d192ed03ULL);
    for (int i = 0; i < 4; i++)
        r->s[i] = splitmix64(&y);
}

uint64_t tf_sw_rng_next(tf_sw_rng *r)
{
    uint64_t *s = r->s;
    const uint64_t result = rotl(s[1] * 5, 7) * 9;
    const uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return result;
}

double tf_sw_rng_uniform(tf_sw_rng *r)
{
    return (double)(tf_sw_rng_next(r) >> 11) * 0x1.0p-53;
}

/* xoshiro256** as a GSL generator of 32-bit words (the upper half of each output),
 * so GSL's ziggurat turns it into normal deviates */
static unsigned long gsl_get(void *state)
{
    return (unsigned long)(tf_sw_rng_next((tf_sw_rng *)state) >> 32);
}

static double gsl_get_double(void *state) { return tf_sw_rng_uniform((tf_sw_rng *)state); }

static void gsl_set(void *state, unsigned long seed)
{
    tf_sw_rng_seed((tf_sw_rng *)state, seed, 0);
}

static const gsl_rng_type xoshiro_type = {"xoshiro256**", 0xffffffffUL, 0, sizeof(tf_sw_rng),
                                          gsl_set, gsl_get, gsl_get_double};

double tf_sw_rng_normal(tf_sw_rng *r)
{
    gsl_rng g = {&xoshiro_type, r};
    return gsl_ran_gaussian_ziggurat(&g, 1.0);
}

tf_status tf_sw_scope_init(tf_sw_scope *sc, const tf_capture_channel_cfg *cfg, const char *name,
                           uint64_t seed, uint64_t stream, int noiseless, tf_error *err)
{
    sc->noise = 0;
    sc->range = 0;
    sc->bits = 0;
    tf_sw_rng_seed(&sc->rng, seed, stream);
    if (noiseless)
        return TF_OK;
    double noise = isnan(cfg->noise) ? 0 : cfg->noise;
    double range = isnan(cfg->range) ? 0 : cfg->range;
    if (!(noise >= 0) || !isfinite(noise))
        return tf_error_set(err, TF_ERR_USAGE, "[capture] %s.noise: expected a sigma >= 0, found %g",
                            name, noise);
    if (!(range >= 0) || !isfinite(range))
        return tf_error_set(err, TF_ERR_USAGE, "[capture] %s.range: expected a range >= 0, found %g",
                            name, range);
    if (cfg->bits < 0 || cfg->bits > 24)
        return tf_error_set(err, TF_ERR_USAGE, "[capture] %s.bits: expected 0 to 24 bits, found %d",
                            name, cfg->bits);
    if (cfg->bits > 0 && range == 0)
        return tf_error_set(err, TF_ERR_USAGE,
                            "[capture] %s.bits: quantisation to %d bits needs %s.range (the +/- "
                            "vertical range the bits span)", name, cfg->bits, name);
    sc->noise = noise;
    sc->range = range;
    sc->bits = cfg->bits;
    return TF_OK;
}

void tf_sw_scope_apply(tf_sw_scope *sc, float *x, size_t n)
{
    if (sc->noise > 0) {
        gsl_rng g = {&xoshiro_type, &sc->rng};
        for (size_t k = 0; k < n; k++)
            x[k] = (float)((double)x[k] + gsl_ran_gaussian_ziggurat(&g, sc->noise));
    }
    if (sc->range > 0 && sc->bits == 0) {
        float hi = (float)sc->range, lo = -hi;
        for (size_t k = 0; k < n; k++)
            x[k] = x[k] > hi ? hi : (x[k] < lo ? lo : x[k]);
    } else if (sc->bits > 0) {
        double lsb = 2.0 * sc->range / ldexp(1.0, sc->bits);
        double qmax = ldexp(1.0, sc->bits - 1) - 1, qmin = -ldexp(1.0, sc->bits - 1);
        for (size_t k = 0; k < n; k++) {
            /* clamp first (also keeps the conversion in range), then round half up:
             * floor(y + 0.5) by truncation of a value kept >= 0 */
            double y = (double)x[k] / lsb;
            y = y > qmax ? qmax : (y < qmin ? qmin : y);
            double q = (double)(int64_t)(y - qmin + 0.5) + qmin;
            x[k] = (float)(q * lsb);
        }
    }
}

long tf_sw_scope_code(const tf_sw_scope *sc, float v)
{
    double lsb = 2.0 * sc->range / ldexp(1.0, sc->bits);
    return lrint((double)v / lsb);
}
