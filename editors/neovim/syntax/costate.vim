" Vim syntax file for costate problem files (*.costate); works in Vim and Neovim.
" The words below follow docs/language.md; editors/check-grammars.mjs fails CI when one is
" missing. Keywords in costate are contextual, so the item words are matched only where an item
" starts (as the parser reads them) and the attribute words only when no `(` follows (`end(x)`
" is the built-in form).

if exists("b:current_syntax")
  finish
endif

syntax case match

" Operators first: for matches starting at the same column Vim prefers the one defined last,
" so comments (below) win over `/`.
syntax match costateOperator "<=\|>=\|==\|\.\.\|[-+*/^=%']"
syntax match costateError "[<>]\%(=\)\@!"

syntax match costateNumber "\<\d\+\%(\.\d\+\)\=\%([eE][-+]\=\d\+\)\=\>"

" Units: `[m/s^2]`, `[1/s]`, `[s^-1]`; an unclosed `[` is not a unit (oneline).
syntax region costateUnit matchgroup=costateUnitBracket start="\[" end="\]" oneline contains=costateUnitNumber,costateUnitOperator
syntax match costateUnitNumber "\d\+" contained
syntax match costateUnitOperator "[*/^-]" contained

" Item keywords, only at the start of an item.
syntax match costateItem "^\s*\zs\%(const\|param\|state\|control\|dynamics\|cost\|path\|boundary\|solve\|expect\)\ze\s*{"
syntax match costateItem "^\s*\zs\%(problem\|fn\|time\)\ze\s\+\h" nextgroup=costateItemName skipwhite
syntax match costateItemName "\h\w*" contained

" Declaration attributes (not the built-in forms `start(x)`, `end(x)`).
syntax match costateAttribute "\<\%(start\|end\|in\|guess\|scale\|free\)\>\%(\s*(\)\@!"

syntax match costateBuiltin "\<\%(sin\|cos\|tan\|asin\|acos\|atan\|atan2\|sinh\|cosh\|tanh\|exp\|log\|sqrt\|abs\|min\|max\|start\|end\|integral\)\ze\s*("
syntax keyword costateConstant pi
syntax keyword costateSense minimize maximize
syntax keyword costateWithin within

" Settings in `solve { key = value }`: the key before `=`, the value after it.
syntax match costateSetting "^\s*\zs\%(intervals\|integrator\|substeps\|control_shape\|tolerance\|iteration_limit\|time_limit\|hessian\)\ze\s*="
syntax match costateSettingValue "=\s*\zs\%(rk4\|radau\|constant\|linear\|bfgs\|exact\)\>"

" `x'` on the left of a dynamics equation.
syntax match costateDerivative "\<\h\w*'"

" Comments last. A `///` line on its own documents the next declaration; `///` after code and
" `////` are ordinary comments (as the lexer decides).
syntax keyword costateTodo contained TODO FIXME XXX NOTE
syntax match costateComment "//.*$" contains=costateTodo,@Spell
syntax match costateDocComment "^\s*\zs///\%(/\)\@!.*$" contains=costateTodo,@Spell

highlight default link costateOperator Operator
highlight default link costateError Error
highlight default link costateNumber Number
highlight default link costateUnit Type
highlight default link costateUnitBracket Delimiter
highlight default link costateUnitNumber Number
highlight default link costateUnitOperator Type
highlight default link costateItem Keyword
highlight default link costateItemName Identifier
highlight default link costateAttribute StorageClass
highlight default link costateBuiltin Function
highlight default link costateConstant Constant
highlight default link costateSense Statement
highlight default link costateWithin Statement
highlight default link costateSetting Identifier
highlight default link costateSettingValue Constant
highlight default link costateDerivative Special
highlight default link costateTodo Todo
highlight default link costateComment Comment
highlight default link costateDocComment SpecialComment

let b:current_syntax = "costate"
