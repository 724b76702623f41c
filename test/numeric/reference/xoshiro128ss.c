/* Reference outputs for test/numeric/random.test.ts.
 * xoshiro128** 1.1 as in Blackman & Vigna's public-domain xoshiro128starstar.c, seeded with two outputs
 * of splitmix64 (Vigna's splitmix64.c); written out here so the check does not depend on our TypeScript.
 * Build and run: cc -O2 -o /tmp/xoshiro128ss xoshiro128ss.c && /tmp/xoshiro128ss
 */
#include <stdint.h>
#include <stdio.h>

static uint64_t sm;
static uint64_t splitmix64(void) {
  uint64_t z = (sm += 0x9e3779b97f4a7c15ULL);
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

static uint32_t s[4];
static inline uint32_t rotl(const uint32_t x, int k) { return (x << k) | (x >> (32 - k)); }
static uint32_t next(void) {
  const uint32_t result = rotl(s[1] * 5, 7) * 9;
  const uint32_t t = s[1] << 9;
  s[2] ^= s[0];
  s[3] ^= s[1];
  s[1] ^= s[2];
  s[0] ^= s[3];
  s[2] ^= t;
  s[3] = rotl(s[3], 11);
  return result;
}

static void seed(uint64_t x) {
  sm = x;
  uint64_t a = splitmix64(), b = splitmix64();
  s[0] = (uint32_t)a; s[1] = (uint32_t)(a >> 32); s[2] = (uint32_t)b; s[3] = (uint32_t)(b >> 32);
}

int main(void) {
  sm = 0;
  printf("splitmix64(seed 0) first output: 0x%016llx\n", (unsigned long long)splitmix64());
  uint64_t seeds[] = {0, 42, (uint64_t)-1};
  for (int k = 0; k < 3; k++) {
    seed(seeds[k]);
    printf("seed %lld uint32:", (long long)seeds[k]);
    for (int i = 0; i < 8; i++) printf(" %u", next());
    printf("\n");
  }
  seed(42);
  printf("seed 42 res53:");
  for (int i = 0; i < 4; i++) {
    uint32_t a = next() >> 5, b = next() >> 6;
    printf(" %.17g", (a * 67108864.0 + b) / 9007199254740992.0);
  }
  printf("\n");
  return 0;
}
