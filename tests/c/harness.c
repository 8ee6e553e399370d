/* Test harness: reads integer input rows from stdin, prints the generated code's outputs.
 * Build with -DKT_HEADER='"name_ff.h"' -DKT_PREFIX=name. Mode "ff" (7 inputs) or "fwd" (7 inputs). */
#include <stdio.h>
#include <string.h>
#include KT_HEADER

#define KT_CAT2(a, b) a##b
#define KT_CAT(a, b) KT_CAT2(a, b)

int main(int argc, char **argv)
{
    long v[7];
    int fwd = (argc > 1 && strcmp(argv[1], "fwd") == 0);
    while (scanf("%ld %ld %ld %ld %ld %ld %ld", &v[0], &v[1], &v[2], &v[3], &v[4], &v[5], &v[6]) == 7) {
        if (fwd) {
            KT_CAT(KT_PREFIX, _fwd_in_t) in;
            KT_CAT(KT_PREFIX, _fwd_out_t) out;
            in.current[0] = (int32_t)v[0];
            in.current[1] = (int32_t)v[1];
            in.speed[0] = (int32_t)v[2];
            in.speed[1] = (int32_t)v[3];
            in.pitch = (int32_t)v[4];
            in.roll = (int32_t)v[5];
            in.payload = (int32_t)v[6];
            KT_CAT(KT_PREFIX, _forward)(&in, &out);
            printf("%ld %ld %lu\n", (long)out.accel[0], (long)out.accel[1], (unsigned long)out.clamped);
        } else {
            KT_CAT(KT_PREFIX, _ff_in_t) in;
            KT_CAT(KT_PREFIX, _ff_out_t) out;
            in.speed[0] = (int32_t)v[0];
            in.speed[1] = (int32_t)v[1];
            in.accel[0] = (int32_t)v[2];
            in.accel[1] = (int32_t)v[3];
            in.pitch = (int32_t)v[4];
            in.roll = (int32_t)v[5];
            in.payload = (int32_t)v[6];
            KT_CAT(KT_PREFIX, _feedforward)(&in, &out);
            printf("%ld %ld %lu\n", (long)out.current[0], (long)out.current[1], (unsigned long)out.clamped);
        }
    }
    return 0;
}
