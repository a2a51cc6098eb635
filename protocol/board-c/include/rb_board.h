/*
 * include/rb_board.h -- the public header lives in src/ (the layout sketch-style frameworks
 * expect: a library's headers beside its sources in src/); this one lets a build that puts
 * include/ on its include path find it there too.
 */
#include "../src/rb_board.h"
