# embed.cmake - write a C source holding the bytes of a file as a string.
# Usage: cmake -DIN=file -DOUT=file.c -DNAME=symbol -P embed.cmake
file(READ "${IN}" hex HEX)
string(REGEX REPLACE "([0-9a-f][0-9a-f])" "0x\\1," bytes "${hex}")
file(WRITE "${OUT}" "/* generated from ${NAME}; do not edit */\n#include <stddef.h>\nconst unsigned char ${NAME}[] = {${bytes} 0x00};\nconst size_t ${NAME}_len = sizeof(${NAME}) - 1;\n")
