/* Replays fuzz inputs without libFuzzer: each argument is a file or a folder of files, fed to
 * LLVMFuzzerTestOneInput one at a time, each from a fresh exact-size allocation so the
 * sanitizers catch any overread. Built for every harness; the tests run it over the corpus. */
#include <dirent.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static int run_file(const char *path)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        fprintf(stderr, "replay: cannot open %s\n", path);
        return 1;
    }
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    uint8_t *buf = malloc(n > 0 ? (size_t)n : 1);
    if (!buf || (n > 0 && fread(buf, 1, (size_t)n, f) != (size_t)n)) {
        fclose(f);
        free(buf);
        fprintf(stderr, "replay: cannot read %s\n", path);
        return 1;
    }
    fclose(f);
    LLVMFuzzerTestOneInput(buf, (size_t)n);
    free(buf);
    return 0;
}

int main(int argc, char **argv)
{
    int files = 0, bad = 0;
    for (int i = 1; i < argc; i++) {
        struct stat st;
        if (stat(argv[i], &st) != 0) {
            fprintf(stderr, "replay: no such file %s\n", argv[i]);
            return 1;
        }
        if (S_ISDIR(st.st_mode)) {
            DIR *d = opendir(argv[i]);
            struct dirent *e;
            while (d && (e = readdir(d)) != NULL) {
                if (e->d_name[0] == '.') continue;
                char p[4096];
                snprintf(p, sizeof p, "%s/%s", argv[i], e->d_name);
                bad |= run_file(p);
                files++;
            }
            if (d) closedir(d);
        } else {
            bad |= run_file(argv[i]);
            files++;
        }
    }
    printf("replayed %d inputs\n", files);
    return bad || files == 0;
}
