/* seq.c - placeholder until the module lands. */
typedef int pl__placeholder_seq;
