/* SHA-256 against the example vectors of NIST FIPS 180-2 Appendix B / the NIST "Examples with
 * intermediate values" for FIPS 180-4 (SHA256.pdf), plus splitting invariance of the streaming API.
 * The live comparison with python hashlib and coreutils sha256sum is tests/cli/sha256_live.sh,
 * which calls this program as `test_sha256 --file PATH` (prints the hex digest). */
#include "core/sha256.h"
#include "harness.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int same_hex(const char *got, const char *want, const char *what)
{
    return check_true(strcmp(got, want) == 0, "%s: got %s want %s", what, got, want);
}

HARNESS_CASE(fips_one_block)
{
    char hex[BL_SHA256_HEX_SIZE];
    /* FIPS 180-2 Appendix B.1: one-block message "abc". */
    bl_sha256_hex("abc", 3, hex);
    same_hex(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad", "FIPS 180-2 B.1 'abc'");
}

HARNESS_CASE(fips_two_blocks)
{
    char hex[BL_SHA256_HEX_SIZE];
    /* FIPS 180-2 Appendix B.2: two-block 448-bit message (padding spills into a second block). */
    const char *m2 = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    bl_sha256_hex(m2, strlen(m2), hex);
    same_hex(hex, "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1", "FIPS 180-2 B.2 448-bit");
}

HARNESS_CASE(fips_million_a_chunked)
{
    char hex[BL_SHA256_HEX_SIZE];
    /* FIPS 180-2 Appendix B.3: one million repetitions of 'a', fed in uneven chunks. */
    {
        bl_sha256 ctx;
        unsigned char d[BL_SHA256_DIGEST_SIZE];
        char *a = malloc(1000000);
        if (!check_true(a != NULL, "1 MB allocated")) return;
        memset(a, 'a', 1000000);
        bl_sha256_init(&ctx);
        size_t done = 0, step = 1;
        while (done < 1000000) {
            size_t n = step < 1000000 - done ? step : 1000000 - done;
            bl_sha256_update(&ctx, a + done, n);
            done += n;
            step = step * 7 % 4093 + 1; /* chunk sizes that straddle block edges */
        }
        bl_sha256_final(&ctx, d);
        static const char digits[] = "0123456789abcdef";
        for (int i = 0; i < 32; i++) {
            hex[2 * i] = digits[d[i] >> 4];
            hex[2 * i + 1] = digits[d[i] & 15];
        }
        hex[64] = '\0';
        same_hex(hex, "cdc76e5c9914fb9281a1c7e284d73e67f1809a48a497200e046d39ccc7112cd0",
                 "FIPS 180-2 B.3 million 'a' (chunked)");
        free(a);
    }
}

HARNESS_CASE(empty_and_896_bit_messages)
{
    char hex[BL_SHA256_HEX_SIZE];
    /* Empty message: NIST CAVS SHA256ShortMsg, Len = 0 (value from memory; also checked live). */
    bl_sha256_hex("", 0, hex);
    same_hex(hex, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855", "empty message");

    /* 896-bit message of the NIST SHA-2 example set (value from memory; also checked live). */
    const char *m4 = "abcdefghbcdefghicdefghijdefghijkefghijklfghijklmghijklmnhijklmnoijklmnopjklmnopqklmnopqrlmnopqrs"
                     "mnopqrstnopqrstu";
    bl_sha256_hex(m4, strlen(m4), hex);
    same_hex(hex, "cf5b16a778af8380036ce59e7b0492370b249b11e8f07a51afac45037afee9d1", "896-bit message");
}

HARNESS_CASE(streaming_splits)
{
    /* Streaming: every split of a 200-byte message gives the one-shot digest. */
    {
        unsigned char msg[200];
        for (int i = 0; i < 200; i++) msg[i] = (unsigned char)(i * 37 + 11);
        char whole[BL_SHA256_HEX_SIZE];
        bl_sha256_hex(msg, sizeof msg, whole);
        int all = 1;
        for (size_t cut = 0; cut <= sizeof msg; cut++) {
            bl_sha256 ctx;
            unsigned char d[BL_SHA256_DIGEST_SIZE];
            bl_sha256_init(&ctx);
            bl_sha256_update(&ctx, msg, cut);
            bl_sha256_update(&ctx, msg + cut, sizeof msg - cut);
            bl_sha256_final(&ctx, d);
            char h2[BL_SHA256_HEX_SIZE];
            static const char digits[] = "0123456789abcdef";
            for (int i = 0; i < 32; i++) {
                h2[2 * i] = digits[d[i] >> 4];
                h2[2 * i + 1] = digits[d[i] & 15];
            }
            h2[64] = '\0';
            if (strcmp(h2, whole) != 0) all = 0;
        }
        check_true(all, "two-part updates at every split point 0..200 equal the one-shot digest");
    }
}

HARNESS_CASE(missing_file)
{
    char hex[BL_SHA256_HEX_SIZE];
    /* A missing file is an I/O error naming it. */
    {
        bl_error err = {0};
        bl_status st = bl_sha256_file("/nonexistent/bandlink-sha256", hex, &err);
        check_true(st == BL_ERR_IO && strstr(err.message, "/nonexistent/bandlink-sha256") != NULL,
                   "missing file: BL_ERR_IO naming the path (%s)", err.message);
    }
}

int main(int argc, char **argv)
{
    /* test_sha256 --file PATH prints the file's digest (for tests/cli/sha256_live.sh). */
    if (argc == 3 && strcmp(argv[1], "--file") == 0) {
        char hex[BL_SHA256_HEX_SIZE];
        bl_error err = {0};
        if (bl_sha256_file(argv[2], hex, &err) != BL_OK) {
            fprintf(stderr, "%s\n", err.message);
            return 1;
        }
        printf("%s\n", hex);
        return 0;
    }
    static const harness_case cases[] = {
        HARNESS_ENTRY(fips_one_block),         HARNESS_ENTRY(fips_two_blocks),
        HARNESS_ENTRY(fips_million_a_chunked), HARNESS_ENTRY(empty_and_896_bit_messages),
        HARNESS_ENTRY(streaming_splits),       HARNESS_ENTRY(missing_file),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
