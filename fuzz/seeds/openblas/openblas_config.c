/* The source of this folder's seeds (the shape of OpenBLAS's
   driver/others/openblas_get_config.c, as tests/stack_fixtures.rs compiles it):
   cc -shared -fPIC -O2 -s -o libopenblas-O2.so openblas_config.c
   cc -shared -fPIC -O0 -s -o libopenblas-O0.so openblas_config.c */
#include <stdio.h>
#include <string.h>
typedef struct { int dtb_entries; } gotoblas_t;
gotoblas_t gotoblas_PRESCOTT, gotoblas_NEHALEM, gotoblas_SANDYBRIDGE, gotoblas_HASWELL, gotoblas_SKYLAKEX;
char *gotoblas_corename(void);
int openblas_get_parallel(void) { return 2; }
static char tmp_config_str[256];
char *openblas_get_config(void) {
  char tmpstr[20];
  strcpy(tmp_config_str, "OpenBLAS 0.3.99 DYNAMIC_ARCH NO_AFFINITY USE_OPENMP ");
  strcat(tmp_config_str, gotoblas_corename());
  if (openblas_get_parallel() == 0) sprintf(tmpstr, " SINGLE_THREADED");
  else snprintf(tmpstr, 19, " MAX_THREADS=%d", 128);
  strcat(tmp_config_str, tmpstr);
  return tmp_config_str;
}
char *gotoblas_corename(void) { return "Haswell"; }
