/* SHA-256 checksums of data and files through OpenSSL's libcrypto (EVP message digests). */
#include <collshift/report.h>

#include <errno.h>
#include <stdio.h>
#include <string.h>

#include <openssl/evp.h>

static void to_hex(const unsigned char *md, unsigned len, char hex[65])
{
    static const char digits[] = "0123456789abcdef";
    for (unsigned i = 0; i < len && i < 32; i++) {
        hex[2 * i] = digits[md[i] >> 4];
        hex[2 * i + 1] = digits[md[i] & 15];
    }
    hex[64] = '\0';
}

int cs_sha256_hex(const void *data, size_t len, char hex[65], cs_error *err)
{
    if (!hex || (!data && len > 0))
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "sha256: NULL argument");
    unsigned char md[EVP_MAX_MD_SIZE];
    unsigned mdlen = 0;
    if (EVP_Digest(len ? data : "", len, md, &mdlen, EVP_sha256(), NULL) != 1 || mdlen != 32)
        return cs_error_set(err, CS_EUNSUP, NULL, -1, -1, "sha256: libcrypto digest failed");
    to_hex(md, mdlen, hex);
    return CS_OK;
}

int cs_sha256_file(const char *path, char hex[65], cs_error *err)
{
    if (!path || !hex)
        return cs_error_set(err, CS_EINVAL, NULL, -1, -1, "sha256: NULL argument");
    FILE *f = fopen(path, "rb");
    if (!f)
        return cs_error_set(err, CS_EIO, path, -1, -1, "cannot open: %s", strerror(errno));
    EVP_MD_CTX *ctx = EVP_MD_CTX_new();
    if (!ctx || EVP_DigestInit_ex(ctx, EVP_sha256(), NULL) != 1) {
        EVP_MD_CTX_free(ctx);
        fclose(f);
        return cs_error_set(err, CS_EUNSUP, path, -1, -1, "sha256: libcrypto digest failed");
    }
    unsigned char buf[65536];
    size_t got;
    int rc = CS_OK;
    while ((got = fread(buf, 1, sizeof buf, f)) > 0) {
        if (EVP_DigestUpdate(ctx, buf, got) != 1) {
            rc = cs_error_set(err, CS_EUNSUP, path, -1, -1, "sha256: libcrypto digest failed");
            break;
        }
    }
    if (rc == CS_OK && ferror(f))
        rc = cs_error_set(err, CS_EIO, path, -1, -1, "read error: %s", strerror(errno));
    unsigned char md[EVP_MAX_MD_SIZE];
    unsigned mdlen = 0;
    if (rc == CS_OK && (EVP_DigestFinal_ex(ctx, md, &mdlen) != 1 || mdlen != 32))
        rc = cs_error_set(err, CS_EUNSUP, path, -1, -1, "sha256: libcrypto digest failed");
    if (rc == CS_OK)
        to_hex(md, mdlen, hex);
    EVP_MD_CTX_free(ctx);
    fclose(f);
    return rc;
}
