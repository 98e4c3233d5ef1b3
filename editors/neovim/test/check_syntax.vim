" Checks syntax/costate.vim over every examples/*.costate file: comments and doc comments,
" numbers, units, item keywords, attributes, built-ins and senses get their groups.
"   nvim --headless -u NONE -i NONE -S editors/neovim/test/check_syntax.vim
"   vim -N -u NONE -i NONE -Es -S editors/neovim/test/check_syntax.vim
" Prints one line per problem and exits non-zero when there is any.

set nocompatible
let s:here = expand('<sfile>:p:h')
let s:root = fnamemodify(s:here, ':h:h:h')
execute 'set runtimepath^=' . fnameescape(fnamemodify(s:here, ':h'))
filetype plugin on
syntax on

let s:errors = []
let s:counts = {'comment': 0, 'doc': 0, 'number': 0, 'unit': 0, 'item': 0, 'attribute': 0, 'builtin': 0, 'sense': 0}

function! s:Group(lnum, col) abort
  return synIDattr(synID(a:lnum, a:col, 1), 'name')
endfunction

function! s:Expect(lnum, col, groups, what) abort
  let got = s:Group(a:lnum, a:col)
  if index(a:groups, got) < 0
    call add(s:errors, printf('%s:%d:%d: %s has group "%s", expected %s: %s',
          \ fnamemodify(bufname('%'), ':.'), a:lnum, a:col, a:what, got, join(a:groups, ' or '), getline(a:lnum)))
  endif
endfunction

" Calls Expect on the first character of every match of pat in text.
function! s:EachMatch(lnum, text, pat, groups, what, key) abort
  let start = 0
  while 1
    let m = matchstrpos(a:text, a:pat, start)
    if m[1] < 0
      break
    endif
    call s:Expect(a:lnum, m[1] + 1, a:groups, a:what . ' "' . m[0] . '"')
    let s:counts[a:key] += 1
    let start = m[2] > m[1] ? m[2] : m[1] + 1
  endwhile
endfunction

function! s:CheckFile(file) abort
  execute 'silent edit ' . fnameescape(a:file)
  if &filetype !=# 'costate'
    call add(s:errors, a:file . ': filetype is "' . &filetype . '", expected costate')
    return
  endif
  for lnum in range(1, line('$'))
    let text = getline(lnum)
    let c = stridx(text, '//')
    if c >= 0
      let doc = text =~# '^\s*///\%(/\)\@!'
      let group = doc ? ['costateDocComment'] : ['costateComment']
      call s:Expect(lnum, c + 1, group, 'comment start')
      call s:Expect(lnum, len(text), group, 'comment end')
      let s:counts[doc ? 'doc' : 'comment'] += 1
      let code = strpart(text, 0, c)
    else
      let code = text
    endif
    call s:EachMatch(lnum, code, '\<\d\+\%(\.\d\+\)\=\%([eE][-+]\=\d\+\)\=\>', ['costateNumber', 'costateUnitNumber'], 'number', 'number')
    call s:EachMatch(lnum, code, '\[', ['costateUnitBracket'], 'unit bracket', 'unit')
    call s:EachMatch(lnum, code, '\[[^]]*\zs\a', ['costateUnit'], 'unit name', 'unit')
    call s:EachMatch(lnum, code, '^\s*\zs\%(const\|param\|state\|control\|dynamics\|cost\|path\|boundary\|solve\|expect\)\ze\s*{', ['costateItem'], 'item keyword', 'item')
    call s:EachMatch(lnum, code, '^\s*\zs\%(problem\|fn\|time\)\ze\s\+\h', ['costateItem'], 'item keyword', 'item')
    call s:EachMatch(lnum, code, '\<\%(sin\|cos\|tan\|asin\|acos\|atan\|atan2\|sinh\|cosh\|tanh\|exp\|log\|sqrt\|abs\|min\|max\|start\|end\|integral\)\ze\s*(', ['costateBuiltin'], 'built-in', 'builtin')
    call s:EachMatch(lnum, code, '\<\%(start\|end\|in\|guess\|scale\|free\)\>\%(\s*(\)\@!', ['costateAttribute'], 'attribute', 'attribute')
    call s:EachMatch(lnum, code, '\<\%(minimize\|maximize\)\>', ['costateSense'], 'sense', 'sense')
  endfor
endfunction

let s:files = sort(glob(s:root . '/examples/*.costate', 0, 1))
if empty(s:files)
  call add(s:errors, 'no examples found under ' . s:root . '/examples')
endif
for s:file in s:files
  call s:CheckFile(s:file)
endfor
" A check that matched nothing would prove nothing.
for [s:kind, s:n] in items(s:counts)
  if s:n == 0
    call add(s:errors, 'no ' . s:kind . ' checked in the examples')
  endif
endfor

" Contextual cases.
enew
setfiletype costate
call setline(1, ['x = 1 /// trailing', 'cost {', '  minimize end(x)', '}'])
call s:Expect(1, 7, ['costateComment'], '/// after code')
call s:Expect(3, 12, ['costateBuiltin'], 'end before (')

if empty(s:errors)
  call writefile(['check_syntax: ' . len(s:files) . ' examples highlighted as expected'], '/dev/stdout')
  qall!
else
  call writefile(s:errors, '/dev/stdout')
  cquit!
endif
