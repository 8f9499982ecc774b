/* map_csv.c - placeholder until the module lands. */
typedef int pl__placeholder_map_csv;
