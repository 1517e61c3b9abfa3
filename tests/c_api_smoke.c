/* A C11 program that uses sprig only through sprig.h; c_api_test.cc runs it and checks what it
 * prints against the C++ API.
 *
 *   sprig_c_smoke STACK.sprig [LM.sprig]
 *
 * Prints, one per line: the version; the error for a missing file; the stack's dimensions, the
 * session's kernel instruction set and each output of a two-row forward pass as "y INDEX VALUE
 * BITS" (BITS: the float's IEEE bits in hex, so the comparison is exact); with an lm, the tokens of
 * a seeded generation as "tokens T1 T2 ...". Inputs are x[r][i] = ((31 r + 17 i) mod 23 - 11) / 8,
 * exact in float. Exits 1 on any unexpected result. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "sprig/sprig.h"

static int Fail(const char* what, int code, char* err) {
  fprintf(stderr, "%s failed: %s: %s\n", what, sprig_status_name(code), err ? err : "(none)");
  sprig_free(err);
  return 1;
}

static int PrintToken(int32_t token, void* user) {
  int* left = (int*)user;
  printf(" %d", (int)token);
  return --*left > 0;
}

static int RunStack(const char* path) {
  char* err = NULL;
  sprig_model_t* model = NULL;
  int code = sprig_model_open(path, &model, &err);
  if (code != SPRIG_OK) return Fail("sprig_model_open", code, err);
  const size_t in = sprig_model_input_dim(model), out = sprig_model_output_dim(model);
  printf("stack family %d layers %zu in %zu out %zu\n", sprig_model_family(model),
         sprig_model_layer_count(model), in, out);
  sprig_session_t* session = NULL;
  code = sprig_session_create(model, 2, &session, &err);
  /* The session holds the model: closing the handle now must not break it. */
  sprig_model_close(model);
  if (code != SPRIG_OK) return Fail("sprig_session_create", code, err);
  printf("kernel %s threads %zu\n", sprig_session_kernel_path(session),
         sprig_session_threads(session));
  const size_t rows = 2;
  float* x = malloc(rows * in * sizeof(float));
  float* y = malloc(rows * out * sizeof(float));
  if (x == NULL || y == NULL) return Fail("malloc", SPRIG_INTERNAL, NULL);
  for (size_t r = 0; r < rows; ++r) {
    for (size_t i = 0; i < in; ++i) x[r * in + i] = (float)((int)((31 * r + 17 * i) % 23) - 11) / 8;
  }
  code = sprig_session_forward(session, x, rows, y, &err);
  if (code != SPRIG_OK) return Fail("sprig_session_forward", code, err);
  for (size_t k = 0; k < rows * out; ++k) {
    unsigned int bits;
    memcpy(&bits, &y[k], sizeof(bits));
    printf("y %zu %.9g %08x\n", k, (double)y[k], bits);
  }
  /* A stack takes no tokens. */
  const int32_t token = 0;
  code = sprig_session_forward_tokens(session, &token, 1, 1, y, &err);
  printf("tokens into a stack: %s\n", sprig_status_name(code));
  free(x);
  free(y);
  sprig_free(err);
  sprig_session_destroy(session);
  return 0;
}

static int RunLm(const char* path) {
  char* err = NULL;
  sprig_model_t* model = NULL;
  int code = sprig_model_open(path, &model, &err);
  if (code != SPRIG_OK) return Fail("sprig_model_open", code, err);
  sprig_session_t* session = NULL;
  code = sprig_session_create(model, 1, &session, &err);
  if (code != SPRIG_OK) return Fail("sprig_session_create", code, err);
  sprig_generate_options_t options;
  sprig_generate_options_default(&options);
  options.count = 12;
  options.seed = 9;
  options.temperature = 0.7f;
  const int32_t prompt[5] = {'H', 'e', 'l', 'l', 'o'};
  int left = 10; /* stop after ten tokens, before count runs out */
  printf("tokens");
  code = sprig_session_generate(session, prompt, 5, &options, PrintToken, &left, &err);
  printf("\n");
  if (code != SPRIG_OK) return Fail("sprig_session_generate", code, err);
  printf("position %zu vocab %zu max_seq %zu\n", sprig_session_position(session),
         sprig_model_vocab_size(model), sprig_model_max_seq(model));
  sprig_session_destroy(session);
  sprig_model_close(model);
  return 0;
}

int main(int argc, char** argv) {
  if (argc < 2) {
    fprintf(stderr, "usage: %s STACK.sprig [LM.sprig]\n", argv[0]);
    return 2;
  }
  printf("version %s\n", sprig_version());
  char* err = NULL;
  sprig_model_t* model = (sprig_model_t*)1; /* must be cleared on failure */
  const int code = sprig_model_open("no-such-model.sprig", &model, &err);
  printf("missing: %s, model %s: %s\n", sprig_status_name(code), model ? "set" : "NULL",
         err ? err : "(no message)");
  sprig_free(err);
  printf("null session: %s\n", sprig_status_name(sprig_session_forward(NULL, NULL, 0, NULL, NULL)));
  if (RunStack(argv[1]) != 0) return 1;
  if (argc > 2 && RunLm(argv[2]) != 0) return 1;
  return 0;
}
