/* Baseline for the instruction-count benchmark: a straightforward float implementation of the same
 * model and the same API (firmware steps in, current steps out), written by hand for comparison only.
 * Float-only approximations stand in for sinf/cosf/expf (polynomials; zig's bundled ones compute in
 * double), and every division by a constant is a multiplication by its reciprocal. */
#include <stdint.h>
#include "float_params.h"

typedef struct { int32_t speed[2]; int32_t accel[2]; int32_t pitch; int32_t roll; int32_t payload; } bl_in_t;
typedef struct { int32_t current[2]; uint32_t clamped; } bl_out_t;

static float sin_small(float x)  /* |x| <= 0.8 rad: Taylor to x^7 */
{
    const float x2 = x * x;
    return x * (1.0f + x2 * (-0.16666667f + x2 * (0.0083333333f - x2 * 0.00019841270f)));
}

static float cos_small(float x)
{
    const float x2 = x * x;
    return 1.0f + x2 * (-0.5f + x2 * (0.041666667f - x2 * 0.0013888889f));
}

static float exp_neg(float t)    /* exp(-t), t >= 0: 2^-(t log2 e) split into integer and fraction */
{
    union { float f; uint32_t u; } scale;
    float y, f, p;
    int32_t n;
    if (t > 80.0f) {
        return 0.0f;
    }
    y = t * 1.44269504f;
    n = (int32_t)y;
    f = y - (float)n;             /* 2^-f on [0, 1) */
    p = 1.0f + f * (-0.69314718f + f * (0.24022651f + f * (-0.055504109f + f * (0.0096181291f - f * 0.0013333558f))));
    scale.u = (uint32_t)(127 - n) << 23;
    return p * scale.f;
}

static int32_t clamp(int32_t x, int32_t lo, int32_t hi, uint32_t bit, uint32_t *flags)
{
    if (x < lo) { *flags |= bit; return lo; }
    if (x > hi) { *flags |= bit; return hi; }
    return x;
}

static float shape(float u)
{
    const float a = u < 0.0f ? -u : u;
    const float s = KT_RAMP ? (a * KT_INV_DEADBAND < 1.0f ? a * KT_INV_DEADBAND : 1.0f) : (a > KT_DEADBAND ? 1.0f : 0.0f);
    return u < 0.0f ? -s : s;
}

static float friction(float u)
{
    const float r = u * KT_INV_STRIBECK;
    return (KT_COULOMB + KT_STRIBECK_BUMP * exp_neg(r * r)) * shape(u) + KT_VISCOUS * u;
}

static float backdrive_scale(float u)  /* 1 at standstill, the back-driving ratio beyond the blend band */
{
    const float a = (u < 0.0f ? -u : u) * KT_INV_BLEND;
    return 1.0f + (KT_BACK_RATIO - 1.0f) * (a < 1.0f ? a : 1.0f);
}

static int32_t to_steps(float x)
{
    return x >= 0.0f ? (int32_t)(x + 0.5f) : -(int32_t)(0.5f - x);
}

void bl_feedforward(const bl_in_t *in, bl_out_t *out)
{
    uint32_t flags = 0u;
    const float ur = (float)clamp(in->speed[0], -KT_SPEED_MAX, KT_SPEED_MAX, 1u, &flags) * KT_SPEED_LSB;
    const float ul = (float)clamp(in->speed[1], -KT_SPEED_MAX, KT_SPEED_MAX, 2u, &flags) * KT_SPEED_LSB;
    const float ar = (float)clamp(in->accel[0], -KT_ACCEL_MAX, KT_ACCEL_MAX, 4u, &flags) * KT_ACCEL_LSB;
    const float al = (float)clamp(in->accel[1], -KT_ACCEL_MAX, KT_ACCEL_MAX, 8u, &flags) * KT_ACCEL_LSB;
    const float th = (float)clamp(in->pitch, -KT_PITCH_MAX, KT_PITCH_MAX, 16u, &flags) * KT_ANGLE_LSB;
    const float ph = (float)clamp(in->roll, -KT_ROLL_MAX, KT_ROLL_MAX, 32u, &flags) * KT_ANGLE_LSB;
    const float p = (float)clamp(in->payload, 0, KT_PAYLOAD_MAX, 64u, &flags) * KT_MASS_LSB;
    const float m = KT_BODY_MASS + p;
    const float mc = KT_BODY_MC + p * KT_PAY_CP;
    const float mh = KT_BODY_MH + p * KT_PAY_HP;
    const float ip = KT_BODY_IP + p * KT_PAY_IP;
    const float m11 = 0.25f * m + ip * KT_INV_4B2 + KT_MROT;
    const float m12 = 0.25f * m - ip * KT_INV_4B2;
    const float st = sin_small(th), ct = cos_small(th), sp = sin_small(ph), cp = cos_small(ph);
    const float weight = m * KT_G;
    const float nd = KT_G * (ct * cp * (mc + m * KT_LC) - st * mh) * KT_INV_LC;
    const float level = 0.5f * (KT_CRR_W * nd + KT_CRR_C * (weight * ct * cp - nd));
    const float gp = 0.5f * weight * st;
    const float gr = mc * KT_G * KT_INV_2B * ct * sp;
    const float cor = mc * KT_INV_4B2 * (ur - ul);
    const float qr = m11 * ar + m12 * al + cor * ul + friction(ur) + level * shape(ur) + gp + gr;
    const float ql = m12 * ar + m11 * al - cor * ur + friction(ul) + level * shape(ul) + gp - gr;
    const float kr = (qr > 0.0f && ur < 0.0f) || (qr < 0.0f && ur > 0.0f) ? KT_K_MOT * backdrive_scale(ur) : KT_K_MOT;
    const float kl = (ql > 0.0f && ul < 0.0f) || (ql < 0.0f && ul > 0.0f) ? KT_K_MOT * backdrive_scale(ul) : KT_K_MOT;
    out->current[0] = to_steps(qr * kr);
    out->current[1] = to_steps(ql * kl);
    out->clamped = flags;
}
