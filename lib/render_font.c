/* render_font.c - placeholder until the module lands. */
typedef int pl__placeholder_render_font;
