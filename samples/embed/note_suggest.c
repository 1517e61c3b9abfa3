/* note_suggest_c: the C version of note_suggest, through sprig.h alone. Reads lines from
 * standard input and prints the next words a byte-level sprig language model suggests for
 * each, with the request's latency and the process's resident memory.
 *
 *   note_suggest_c MODEL.sprig [WORDS]
 *
 * Suggestions come from a small sample model: they are often wrong. */
#define _POSIX_C_SOURCE 200809L /* clock_gettime in strict C11 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "sprig/sprig.h"

#define BUDGET 64

typedef struct {
  char text[BUDGET + 2];
  size_t length;
  int words_left;
} suggestion_t;

/* Collects bytes until the requested number of words is complete. */
static int on_token(int32_t token, void* user) {
  suggestion_t* s = (suggestion_t*)user;
  const char c = (char)token;
  if (c == '\n' || s->length >= BUDGET) return 0;
  if ((c == ' ' || c == '.') && s->length > 0 && s->text[s->length - 1] != ' ' &&
      --s->words_left == 0) {
    if (c == '.') s->text[s->length++] = c;
    return 0;
  }
  s->text[s->length++] = c;
  return 1;
}

static double now_ms(void) {
  struct timespec t;
  clock_gettime(CLOCK_MONOTONIC, &t);
  return (double)t.tv_sec * 1e3 + (double)t.tv_nsec / 1e6;
}

int main(int argc, char** argv) {
  sprig_model_t* model = NULL;
  sprig_session_t* session = NULL;
  char* err = NULL;
  char line[4096];
  int32_t prompt[4096];
  int words;
  size_t max_seq, keep;
  if (argc < 2 || argc > 3 || strcmp(argv[1], "--help") == 0) {
    fprintf(stderr, "usage: note_suggest_c MODEL.sprig [WORDS]\n");
    return 2;
  }
  words = argc == 3 ? atoi(argv[2]) : 3;
  if (words <= 0) words = 3;
  if (sprig_model_open(argv[1], &model, &err) != SPRIG_OK ||
      sprig_session_create(model, 1, &session, &err) != SPRIG_OK) {
    fprintf(stderr, "note_suggest_c: %s\n", err ? err : "out of memory");
    sprig_free(err);
    sprig_model_close(model);
    return 2;
  }
  max_seq = sprig_model_max_seq(model);
  keep = max_seq > BUDGET ? max_seq - BUDGET : 1;
  printf("note_suggest_c: suggestions come from a small sample model and are often wrong.\n");
  while (fgets(line, sizeof line, stdin) != NULL) {
    size_t n = strcspn(line, "\n"), first, i;
    sprig_generate_options_t options;
    suggestion_t s;
    sprig_process_memory_t memory;
    double start = now_ms();
    line[n] = '\0';
    first = n > keep ? n - keep : 0; /* keep the end of the note */
    for (i = first; i < n; ++i) prompt[i - first] = (unsigned char)line[i];
    if (n == 0) prompt[0] = '\n';
    sprig_generate_options_default(&options);
    options.count = BUDGET;
    options.temperature = 0.0f;
    memset(&s, 0, sizeof s);
    s.words_left = words;
    if (sprig_session_generate(session, prompt, n > first ? n - first : 1, &options, on_token, &s,
                               &err) != SPRIG_OK) {
      fprintf(stderr, "note_suggest_c: %s\n", err);
      sprig_free(err);
      err = NULL;
      continue;
    }
    s.text[s.length] = '\0';
    sprig_process_memory(&memory);
    printf("%s[%s]\n  %.2f ms, resident %.1f MiB\n", line, s.text, now_ms() - start,
           (double)memory.rss / (1024.0 * 1024.0));
    fflush(stdout);
  }
  sprig_session_destroy(session);
  sprig_model_close(model);
  return 0;
}
